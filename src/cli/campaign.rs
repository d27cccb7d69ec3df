//! The campaign commands: `batch`, `summarize` and `report`. Each holds the results folder's
//! lock while it writes, and maps what the library reports to messages and exit codes.

use std::path::Path;
use std::process::ExitCode;

use crate::batch::{
    self, BatchConfig, DiscoverOptions, Invocation, Opened, ResultsFolder, Scope, Tables,
};
use crate::report::campaign as text;
use crate::rig::RigProfile;

use super::{
    fail, progress, BatchArgs, ReportArgs, EXIT_BUSY, EXIT_INPUTS_KEPT, EXIT_MIXED, EXIT_OUTPUT,
    EXIT_STRICT, EXIT_USAGE,
};

fn note(message: impl std::fmt::Display) {
    eprintln!("latchtime: {message}");
}

/// This process's arguments and working folder, for the run file.
fn invocation() -> Invocation {
    Invocation {
        args: std::env::args_os()
            .skip(1)
            .map(|a| a.to_string_lossy().into_owned())
            .collect(),
        working_dir: std::env::current_dir().unwrap_or_default(),
    }
}

/// Opens and locks `dir` for `scope`, or the exit code that refuses it.
fn hold(dir: &Path, scope: Scope, command: &str) -> Result<ResultsFolder, ExitCode> {
    match batch::open(dir, scope, command) {
        Ok(Opened::Held(folder)) => {
            for h in &folder.taken_over {
                note(text::taken_over(dir, h));
            }
            Ok(folder)
        }
        Ok(Opened::Busy(holders)) => Err(fail(EXIT_BUSY, text::busy(dir, &holders))),
        Err(e) => Err(fail(EXIT_OUTPUT, e)),
    }
}

/// Options that take a value, as written in a batch command, and whether they do.
fn takes_value(arg: &str) -> bool {
    matches!(
        arg,
        "--out"
            | "--rig"
            | "--fps"
            | "--channel"
            | "--column"
            | "--loading-column"
            | "--video-offset-s"
            | "--jobs"
            | "--shard"
    )
}

/// The batch command of `invocation` with `--video-offset-s` set to `offset_s`, without
/// `--shard` and `--force`; prefixed with `cd` when it ran in another folder.
fn rerun_command(invocation: &Invocation, offset_s: f64) -> Option<String> {
    let mut words = vec!["latchtime".to_string()];
    let mut args = invocation.args.iter();
    while let Some(arg) = args.next() {
        let (name, inline) = match arg.split_once('=') {
            Some((n, v)) if n.starts_with("--") => (n, Some(v)),
            _ => (arg.as_str(), None),
        };
        let dropped = matches!(name, "--video-offset-s" | "--shard" | "--force");
        let value = if takes_value(name) && inline.is_none() {
            args.next().cloned()
        } else {
            None
        };
        if dropped {
            continue;
        }
        words.push(text::shell_word(arg));
        words.extend(value.map(|v| text::shell_word(&v)));
    }
    if words.get(1).map(String::as_str) != Some("batch") {
        return None;
    }
    words.push("--video-offset-s".into());
    words.push(format!("{offset_s:.6}"));
    let here = std::env::current_dir().unwrap_or_default();
    let cd = if here == invocation.working_dir || invocation.working_dir.as_os_str().is_empty() {
        String::new()
    } else {
        format!(
            "cd {} && ",
            text::shell_word(&invocation.working_dir.to_string_lossy())
        )
    };
    Some(format!("{cd}{}", words.join(" ")))
}

/// The rig file a batch command named, unless it also overrode the offset.
fn rig_file(invocation: &Invocation) -> Option<String> {
    let args = &invocation.args;
    if args.iter().any(|a| a.starts_with("--video-offset-s")) {
        return None;
    }
    args.iter().enumerate().find_map(|(i, a)| {
        if a == "--rig" {
            args.get(i + 1).cloned()
        } else {
            a.strip_prefix("--rig=").map(str::to_string)
        }
    })
}

/// Prints the lines about the tables; the exit code they call for, if any.
fn report_tables(tables: &Tables, dir: &Path, run: Option<&batch::RunFile>) -> Option<u8> {
    for line in text::tables_lines(tables, dir) {
        note(line);
    }
    match tables {
        Tables::Mixed(_) => Some(EXIT_MIXED),
        Tables::Written {
            suggestion: Some(s),
            ..
        } => {
            let rerun = run.and_then(|r| rerun_command(&r.invocation, s.suggested_offset_s));
            let rig = run.and_then(|r| rig_file(&r.invocation));
            for line in text::offset_suggestion(s, rerun.as_deref(), rig.as_deref()) {
                note(line);
            }
            None
        }
        _ => None,
    }
}

pub(super) fn run_batch(args: BatchArgs) -> ExitCode {
    let rig = match args.rig.profile() {
        Ok(r) => r,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    let options = DiscoverOptions {
        recursive: args.recursive,
        exclude: vec![args.out.clone()],
    };
    let found = match batch::discover_with(&args.input, &options) {
        Ok(t) => t,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    for w in &found.warnings {
        note(text::discovery_warning(w));
    }
    if args.strict && !found.warnings.is_empty() {
        return fail(
            EXIT_STRICT,
            "--strict: discovery warned (above); nothing was run",
        );
    }
    if found.trials.is_empty() {
        note("nothing to do; the results folder was not touched");
        return ExitCode::SUCCESS;
    }
    let (scope, command) = match args.shard {
        Some((k, n)) => (Scope::Shard(k, n), format!("batch --shard {k}/{n}")),
        None => (Scope::Whole, "batch".to_string()),
    };
    let folder = match hold(&args.out, scope, &command) {
        Ok(f) => f,
        Err(code) => return code,
    };
    let config = BatchConfig {
        out_dir: args.out.clone(),
        rig,
        jobs: args.jobs.unwrap_or(0),
        force: args.force,
        shard: args.shard,
        invocation: invocation(),
    };
    let sink = progress::Bar::new(args.quiet);
    let outcome = match batch::run(&folder, found.trials, &config, &sink) {
        Ok(o) => o,
        Err(e) => return fail(EXIT_OUTPUT, e),
    };
    if let Some(e) = &outcome.stopped {
        return fail(EXIT_OUTPUT, text::stopped(e, &outcome));
    }
    let lines = text::batch_lines(&outcome, &args.out);
    let (counts, notes) = lines
        .split_last()
        .map_or((None, &[][..]), |(c, n)| (Some(c), n));
    for line in notes {
        note(line);
    }
    if !args.quiet {
        if let Some(c) = counts {
            note(c);
        }
    }
    let run = batch::runfile::read(&args.out, &outcome.run_file).ok();
    let tables_code = report_tables(&outcome.tables, &args.out, run.as_ref());
    if args.report && tables_code.is_none() {
        let code = write_report(&folder, &config.rig);
        if code != ExitCode::SUCCESS {
            return code;
        }
    }
    if !outcome.kept.is_empty() {
        return ExitCode::from(EXIT_INPUTS_KEPT);
    }
    if let Some(code) = tables_code {
        return ExitCode::from(code);
    }
    if args.strict && outcome.counts.errors > 0 {
        return ExitCode::from(EXIT_STRICT);
    }
    ExitCode::SUCCESS
}

/// Refuses a folder that is not a batch's results folder.
fn check_results_folder(dir: &Path) -> Option<ExitCode> {
    (!batch::trials_dir(dir).is_dir()).then(|| {
        fail(
            EXIT_USAGE,
            format!("{}: not a batch output folder (no trials/)", dir.display()),
        )
    })
}

fn write_report(folder: &ResultsFolder, rig: &RigProfile) -> ExitCode {
    let records = match batch::campaign_records(folder.dir()) {
        Ok(r) => r,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    match batch::write_report(folder, &records, rig) {
        Ok(o) => {
            if o.inputs_missing > 0 {
                note(format!(
                    "{} of {} trials' input files could not be read again; their figures show the record only",
                    o.inputs_missing, o.trials
                ));
            }
            ExitCode::SUCCESS
        }
        Err(e) => fail(EXIT_OUTPUT, e),
    }
}

pub(super) fn run_report_command(args: ReportArgs) -> ExitCode {
    if let Some(code) = check_results_folder(&args.dir) {
        return code;
    }
    let folder = match hold(&args.dir, Scope::Whole, "report") {
        Ok(f) => f,
        Err(code) => return code,
    };
    let rig = match batch::runfile::campaign(&args.dir) {
        Ok(Some(c)) if args.rig.any_given() => {
            return fail(
                EXIT_USAGE,
                format!(
                    "{}: the batch's settings are in {}; report draws with them and takes no --rig or overrides",
                    args.dir.display(),
                    c.files.join(", ")
                ),
            )
        }
        Ok(Some(c)) => c.run.settings,
        Ok(None) => match args.rig.profile() {
            Ok(r) => r,
            Err(e) => return fail(EXIT_USAGE, e),
        },
        Err(e) => return fail(EXIT_USAGE, e),
    };
    write_report(&folder, &rig)
}

pub(super) fn run_summarize(dir: &Path) -> ExitCode {
    if let Some(code) = check_results_folder(dir) {
        return code;
    }
    let folder = match hold(dir, Scope::Whole, "summarize") {
        Ok(f) => f,
        Err(code) => return code,
    };
    match batch::summarize(&folder) {
        Ok((tables, records)) => match report_tables(&tables, dir, records.run.as_ref()) {
            Some(code) => ExitCode::from(code),
            None => ExitCode::SUCCESS,
        },
        Err(e @ crate::Error::Malformed { .. }) => fail(EXIT_USAGE, e),
        Err(e) => fail(EXIT_OUTPUT, e),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_rerun_command_replaces_the_offset_and_drops_shards() {
        let inv = Invocation {
            args: [
                "batch",
                "my data",
                "--out",
                "res",
                "--shard",
                "2/4",
                "--video-offset-s=0.001",
                "--rig",
                "rig.json",
            ]
            .map(String::from)
            .to_vec(),
            working_dir: std::env::current_dir().unwrap(),
        };
        assert_eq!(
            rerun_command(&inv, 0.0125).unwrap(),
            "latchtime batch 'my data' --out res --rig rig.json --video-offset-s 0.012500"
        );
        assert_eq!(rig_file(&inv), None);
    }
}
