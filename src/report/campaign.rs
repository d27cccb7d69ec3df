//! What a campaign run tells a person on the terminal: discovery warnings, a busy folder, what
//! the run did, records moved aside or kept, tables refused, and the clock offset the trials
//! suggest. Each function returns the lines; the CLI prints them.

use std::path::Path;

use crate::batch::discover::Warning;
use crate::batch::offset::OffsetSuggestion;
use crate::batch::{BatchOutcome, Holder, MixedSettings, Tables};

/// At most this many names are listed in one message.
const LISTED: usize = 10;

fn listed(names: &[String]) -> String {
    let mut text = names
        .iter()
        .take(LISTED)
        .cloned()
        .collect::<Vec<_>>()
        .join(", ");
    if names.len() > LISTED {
        text.push_str(&format!(" and {} more", names.len() - LISTED));
    }
    text
}

/// One discovery warning.
pub fn discovery_warning(w: &Warning) -> String {
    match w {
        Warning::NoTrials { input } => format!(
            "{}: no trials found (audio files such as NAME.wav, or NAME.frames.csv)",
            input.display()
        ),
        Warning::SubfolderInputs { folders, files } => format!(
            "{files} audio or frames files in subfolders ({}) are not trials: add --recursive to take them (trial names are then paths such as {}NAME)",
            listed(folders),
            folders.first().map_or("day1/", String::as_str)
        ),
        Warning::NearMiss {
            file,
            trial,
            expected,
        } => format!(
            "{}: not read as the frames of trial {trial}; frames files are named {} (rename it, or the trial is audio-only)",
            file.display(),
            expected.display()
        ),
    }
}

/// Why a results folder is refused: who writes it.
pub fn busy(dir: &Path, holders: &[Holder]) -> String {
    let who = if holders.is_empty() {
        "another latchtime run (finishing or starting)".to_string()
    } else {
        holders
            .iter()
            .map(Holder::to_string)
            .collect::<Vec<_>>()
            .join("; ")
    };
    format!(
        "{}: results folder in use by {who}; one run writes a folder at a time (shards of one campaign excepted): wait for it to end, or use another --out",
        dir.display()
    )
}

/// A lock taken over from a run that ended without releasing it.
pub fn taken_over(dir: &Path, holder: &Holder) -> String {
    format!(
        "{}: took over the lock of {holder}, which is no longer running",
        dir.display()
    )
}

/// The lines after a batch run, stale records and kept records first, the counts last.
pub fn batch_lines(outcome: &BatchOutcome, dir: &Path) -> Vec<String> {
    let c = &outcome.counts;
    let mut lines = Vec::new();
    if !outcome.stale.is_empty() {
        lines.push(format!(
            "moved {} record(s) of trials no longer in the campaign to {}: {}",
            outcome.stale.len(),
            crate::batch::stale_dir(dir).display(),
            listed(&outcome.stale)
        ));
    }
    for (trial, why) in outcome.kept.iter().take(LISTED) {
        lines.push(format!(
            "trial {trial}: inputs cannot be read ({why}); its earlier record is kept"
        ));
    }
    if outcome.kept.len() > LISTED {
        lines.push(format!(
            "... and {} more trials kept their earlier record",
            outcome.kept.len() - LISTED
        ));
    }
    if c.rewritten > 0 {
        lines.push(format!(
            "{} record(s) rewritten for a changed group or input path (no new analysis)",
            c.rewritten
        ));
    }
    lines.push(format!(
        "{} trials ({} analysed, {} current records reused): {} ok, {} flagged, {} errors -> {}",
        c.trials,
        c.analysed,
        c.reused + c.rewritten + c.kept,
        c.ok,
        c.flagged,
        c.errors,
        dir.join("summary.csv").display()
    ));
    lines
}

/// The message of a run stopped by a failed write.
pub fn stopped(error: &crate::Error, outcome: &BatchOutcome) -> String {
    let c = &outcome.counts;
    format!(
        "stopped after the first failed write: {error}. {} trials written or current, {} analysed but not written, {} not started; make room (or make the folder writable) and run the same command again to finish",
        c.analysed + c.reused + c.rewritten + c.kept,
        c.not_written,
        c.not_started
    )
}

fn short(hash: &str) -> &str {
    &hash[..hash.len().min(12)]
}

/// Why the tables were not written: records of several settings.
pub fn mixed(m: &MixedSettings, dir: &Path) -> String {
    let others: Vec<String> = m
        .others
        .iter()
        .map(|((settings, version), n)| {
            if *version == m.expected.1 {
                format!("{n} with settings {}", short(settings))
            } else {
                format!(
                    "{n} from latchtime {version} with settings {}",
                    short(settings)
                )
            }
        })
        .collect();
    format!(
        "{}: summary.csv and groups.csv not written (and old ones removed): {} of {} records were made with other settings or another version than the campaign's (latchtime {}, settings {}): {}; for example {}. Run the batch (every shard, for a sharded campaign) again with the campaign's settings to recompute them",
        dir.display(),
        m.count(),
        m.records,
        m.expected.1,
        short(&m.expected.0),
        others.join(", "),
        m.examples.join(", ")
    )
}

/// Lines about the tables.
pub fn tables_lines(tables: &Tables, dir: &Path) -> Vec<String> {
    match tables {
        Tables::Skipped => Vec::new(),
        Tables::Mixed(m) => vec![mixed(m, dir)],
        Tables::Waiting { missing } => vec![format!(
            "{}: summary.csv and groups.csv wait for the other shards ({missing} trials have no record yet); the last shard to finish writes them, or run `latchtime summarize {}` then",
            dir.display(),
            dir.display()
        )],
        Tables::Written {
            unreadable,
            missing,
            suggestion: _,
        } => {
            let mut lines: Vec<String> = unreadable
                .iter()
                .map(|p| format!("{}: not a readable record, left out", p.display()))
                .collect();
            if !missing.is_empty() {
                lines.push(format!(
                    "{} trials of the campaign have no record, left out of the tables: {}",
                    missing.len(),
                    listed(missing)
                ));
            }
            lines
        }
    }
}

/// Quotes `word` for a POSIX shell when it holds anything but plain characters.
pub fn shell_word(word: &str) -> String {
    let plain = !word.is_empty()
        && word
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || b"-_./:=@%+,".contains(&b));
    if plain {
        word.to_string()
    } else {
        format!("'{}'", word.replace('\'', "'\\''"))
    }
}

/// The clock offset the trials suggest, and how to use it. `rerun` is the command that runs
/// the campaign again with it, `rig_file` the rig profile to edit instead.
pub fn offset_suggestion(
    s: &OffsetSuggestion,
    rerun: Option<&str>,
    rig_file: Option<&str>,
) -> Vec<String> {
    let mut lines = vec![
        format!(
            "{} of {} clean trials disagree with video_offset_s = {:.6} s by a consistent amount: median sync.residual_ms {:.3} ms (95 % interval {:.3} to {:.3} ms, order statistics {} and {}, coverage {:.1} %)",
            s.mismatched,
            s.trials,
            s.current_offset_s,
            s.median_residual_ms,
            s.low_residual_ms,
            s.high_residual_ms,
            s.ranks.0,
            s.ranks.1,
            100.0 * s.coverage
        ),
        format!(
            "the clean trials suggest video_offset_s = {:.6} s (95 % interval {:.6} to {:.6} s)",
            s.suggested_offset_s, s.suggested_low_s, s.suggested_high_s
        ),
    ];
    if let Some(rig) = rig_file {
        lines.push(format!(
            "if the rig's clocks are set up as intended, put \"video_offset_s\": {:.6} in {rig}",
            s.suggested_offset_s
        ));
    }
    if let Some(cmd) = rerun {
        lines.push(format!("re-run with it: {cmd}"));
    }
    lines
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shell_words_are_quoted_only_when_needed() {
        assert_eq!(shell_word("out/dir"), "out/dir");
        assert_eq!(shell_word("my data"), "'my data'");
        assert_eq!(shell_word("it's"), "'it'\\''s'");
        assert_eq!(shell_word(""), "''");
    }

    #[test]
    fn long_lists_are_cut_with_a_count() {
        let names: Vec<String> = (0..13).map(|i| format!("t{i}")).collect();
        assert!(listed(&names).ends_with("t9 and 3 more"));
    }
}
