//! Campaigns: discovery, parallel analysis (rayon, one worker per job), resume, sharding and the
//! tables. A results folder describes one campaign, the trials of the latest run's input, made
//! with one set of settings, and has one writer at a time ([`lock`]).
//!
//! Every record is written atomically as soon as its trial is done, so a killed run leaves
//! only complete records; the disk is flushed once per group of records ([`atomic::GroupSync`]:
//! a power cut loses at most the last group, which the next run recomputes). A trial is skipped on a re-run when its record was made from the same
//! input bytes, the same effective settings and the same tool version (BLAKE3 of each, stored
//! in the record; a record holding the SHA-256 of earlier versions never matches, so it is
//! recomputed once); when only its group or input paths changed, the record is rewritten with
//! them without a new analysis. Records of trials no longer in the campaign are moved to
//! `trials/stale/`. A trial whose inputs cannot be read keeps its earlier good record. The
//! first failed write stops the run: trials in flight finish, no new one starts.

pub mod atomic;
pub mod discover;
pub mod lock;
pub mod offset;
mod review;
pub mod runfile;
mod tables;

use std::collections::HashSet;
use std::panic::AssertUnwindSafe;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;

use rayon::prelude::*;
use sha2::{Digest, Sha256};

use crate::error::{Error, Result};
use crate::measure::{Provenance, Status, TrialRecord};
use crate::pipeline::{self, Scratch, TrialInputs};
use crate::report;
use crate::rig::RigProfile;
pub use discover::{discover, discover_with, DiscoverOptions, Discovered, Discovery};
pub use lock::{Holder, Scope};
pub use review::{write_report, ReportOutcome};
pub use runfile::{Invocation, RunCounts, RunFile, TrialOutcome};
pub use tables::{campaign_records, summarize, CampaignRecords, MixedSettings, Tables};

/// How a batch runs.
#[derive(Debug, Clone)]
pub struct BatchConfig {
    pub out_dir: PathBuf,
    pub rig: RigProfile,
    /// Worker threads; 0 means one per core.
    pub jobs: usize,
    /// Recompute every trial even when its record is current.
    pub force: bool,
    /// Analyse only shard `k` of `n` (1-based), chosen by a hash of the trial name.
    pub shard: Option<(u64, u64)>,
    /// How the run was started, kept in the run file.
    pub invocation: Invocation,
}

/// Receives progress events; the CLI draws them. Called from worker threads.
pub trait Progress: Sync {
    /// The batch has `total` trials to go through.
    fn start(&self, total: usize);
    /// One trial is finished; `reused` when no new analysis was needed.
    fn trial_done(&self, record: &TrialRecord, reused: bool);
    /// All trials are done.
    fn finish(&self);
}

/// A progress sink that ignores everything.
pub struct Silent;

impl Progress for Silent {
    fn start(&self, _: usize) {}
    fn trial_done(&self, _: &TrialRecord, _: bool) {}
    fn finish(&self) {}
}

/// What one batch run did.
#[derive(Debug, Default)]
pub struct BatchOutcome {
    pub counts: RunCounts,
    /// Record files moved to `trials/stale/`.
    pub stale: Vec<String>,
    /// Trials whose inputs could not be read and kept their earlier record, with the reason.
    pub kept: Vec<(String, String)>,
    /// The first failed write, when the run stopped on it.
    pub stopped: Option<Error>,
    /// What became of `summary.csv` and `groups.csv`.
    pub tables: Tables,
    /// The run file's name.
    pub run_file: String,
}

/// Lower-case hex BLAKE3 of `bytes`: a cryptographic hash (so a changed input cannot pass for
/// the old one by accident or design) at several times SHA-256's speed.
pub fn blake3_hex(bytes: &[u8]) -> String {
    blake3::hash(bytes).to_hex().to_string()
}

/// BLAKE3 of the effective settings (the rig profile after command-line overrides).
pub fn settings_hash(rig: &RigProfile) -> String {
    blake3_hex(serde_json::to_string(rig).unwrap_or_default().as_bytes())
}

/// Whether `name` falls in shard `k` of `n` (1-based): stable under adding other trials, and
/// across versions (SHA-256 of the name, as since sharding began; a name is short, so the
/// hash's speed does not matter here).
pub fn in_shard(name: &str, k: u64, n: u64) -> bool {
    let digest = Sha256::digest(name.as_bytes());
    let mut head = [0u8; 8];
    head.copy_from_slice(&digest[..8]);
    u64::from_be_bytes(head) % n == k - 1
}

/// Folder of per-trial records inside an output folder.
pub fn trials_dir(out_dir: &Path) -> PathBuf {
    out_dir.join("trials")
}

/// Folder of records of trials no longer in the campaign.
pub fn stale_dir(out_dir: &Path) -> PathBuf {
    trials_dir(out_dir).join("stale")
}

/// The record file name of a trial.
pub fn record_file_name(name: &str) -> String {
    format!("{}.json", discover::record_stem(name))
}

/// Largest record file read back, bytes.
const MAX_RECORD_BYTES: u64 = 64 << 20;

/// The record at `path` when it is a regular file (never through a link) that parses.
pub(crate) fn read_record(path: &Path) -> Option<TrialRecord> {
    let bytes = pipeline::read_bounded(path, MAX_RECORD_BYTES, false).ok()?;
    let text = String::from_utf8(bytes).ok()?;
    report::json::parse_record(&text).ok()
}

/// A results folder held by this process: its lock is released when this is dropped.
#[derive(Debug)]
pub struct ResultsFolder {
    dir: PathBuf,
    scope: Scope,
    _lock: lock::FolderLock,
    /// Holders of the lock that had ended without releasing it.
    pub taken_over: Vec<Holder>,
    /// Temporary files of killed runs removed on opening.
    pub leftovers_removed: usize,
}

/// What [`open`] found.
#[derive(Debug)]
pub enum Opened {
    Held(ResultsFolder),
    /// Another run writes the folder.
    Busy(Vec<Holder>),
}

/// Refuses a folder inside the results folder that is a link or not a folder: writing through
/// it would write outside.
fn check_subfolder(path: &Path) -> Result<()> {
    match std::fs::symlink_metadata(path) {
        Ok(m) if m.is_dir() => Ok(()),
        Ok(m) => Err(Error::malformed(
            path,
            format!(
                "it is {}, not a folder; latchtime writes only inside the results folder (remove it)",
                pipeline::file_kind(&m)
            ),
        )),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(Error::io(path, e)),
    }
}

/// Creates (if needed) and locks the results folder `dir` for `scope`; `command` names this
/// run in the lock file. A whole-folder holder then removes temporary files of killed runs.
pub fn open(dir: &Path, scope: Scope, command: &str) -> Result<Opened> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let subfolders = [trials_dir(dir), stale_dir(dir), dir.join("plots")];
    for sub in &subfolders {
        check_subfolder(sub)?;
    }
    let (lock, taken_over) = match lock::acquire(dir, scope, command)? {
        lock::Acquired::Locked { lock, taken_over } => (lock, taken_over),
        lock::Acquired::Busy(holders) => return Ok(Opened::Busy(holders)),
    };
    let mut leftovers_removed = 0;
    if scope == Scope::Whole {
        for d in std::iter::once(dir.to_path_buf()).chain(subfolders) {
            leftovers_removed += atomic::remove_leftovers(&d, &atomic::Leftovers::All);
        }
    }
    Ok(Opened::Held(ResultsFolder {
        dir: dir.to_path_buf(),
        scope,
        _lock: lock,
        taken_over,
        leftovers_removed,
    }))
}

impl ResultsFolder {
    /// The folder.
    pub fn dir(&self) -> &Path {
        &self.dir
    }
}

fn path_string(p: &Option<PathBuf>) -> Option<String> {
    p.as_deref().map(|p| p.display().to_string())
}

/// Moves records in `trials/` that belong to no trial of `wanted` to `trials/stale/` (for a
/// shard: only those whose file stem falls in its shard). Returns the moved file names.
fn move_stale(
    folder: &ResultsFolder,
    wanted: &HashSet<String>,
    shard: Option<(u64, u64)>,
) -> Result<Vec<String>> {
    let dir = trials_dir(&folder.dir);
    let entries = match std::fs::read_dir(&dir) {
        Ok(e) => e,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Vec::new()),
        Err(e) => return Err(Error::io(&dir, e)),
    };
    let mut stale: Vec<String> = entries
        .flatten()
        .filter(|e| !e.file_type().is_ok_and(|t| t.is_dir()))
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".json") && !n.starts_with('.') && !wanted.contains(n))
        .filter(|n| shard.is_none_or(|(k, n_)| in_shard(n.trim_end_matches(".json"), k, n_)))
        .collect();
    stale.sort();
    if stale.is_empty() {
        return Ok(stale);
    }
    let to = stale_dir(&folder.dir);
    check_subfolder(&to)?;
    std::fs::create_dir_all(&to).map_err(|e| Error::io(&to, e))?;
    for name in &stale {
        std::fs::rename(dir.join(name), to.join(name)).map_err(|e| Error::io(dir.join(name), e))?;
    }
    Ok(stale)
}

/// Runs a batch over discovered trials in a held results folder: records, stale records,
/// tables and the run file. Fails only when the run file cannot be written at the start or
/// a stale record cannot be moved; a failed record write stops the run and is returned in
/// [`BatchOutcome::stopped`].
pub fn run(
    folder: &ResultsFolder,
    trials: Vec<Discovered>,
    config: &BatchConfig,
    progress: &dyn Progress,
) -> Result<BatchOutcome> {
    let out = &folder.dir;
    let dir = trials_dir(out);
    std::fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, e))?;
    let settings = settings_hash(&config.rig);
    let mut run = runfile::RunFile {
        tool: "latchtime".into(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        invocation: config.invocation.clone(),
        shard: config.shard,
        settings: config.rig.clone(),
        settings_blake3: settings.clone(),
        host: lock::host_name(),
        pid: std::process::id(),
        started: lock::now_rfc3339(),
        finished: None,
        stopped: None,
        counts: RunCounts::default(),
        trials: trials
            .iter()
            .map(|t| runfile::RunTrial {
                trial: t.spec.name.clone(),
                group: t.spec.group.clone(),
                audio: path_string(&t.spec.audio),
                frames: path_string(&t.spec.frames),
                record: record_file_name(&t.spec.name),
                outcome: None,
                status: None,
            })
            .collect(),
        stale: Vec::new(),
    };
    runfile::remove_superseded(out, config.shard);
    runfile::write(out, &run)?;
    let wanted: HashSet<String> = run.trials.iter().map(|t| t.record.clone()).collect();
    let mine: Vec<usize> = (0..trials.len())
        .filter(|i| {
            config
                .shard
                .is_none_or(|(k, n)| in_shard(&trials[*i].spec.name, k, n))
        })
        .collect();
    if folder.scope != Scope::Whole {
        let owned: HashSet<String> = mine.iter().map(|i| run.trials[*i].record.clone()).collect();
        atomic::remove_leftovers(&dir, &atomic::Leftovers::For(&owned));
    }
    let stale = move_stale(folder, &wanted, config.shard)?;
    progress.start(mine.len());
    let jobs = if config.jobs == 0 {
        std::thread::available_parallelism().map_or(1, |n| n.get())
    } else {
        config.jobs
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(jobs)
        .build()
        .map_err(|e| Error::Usage(format!("cannot start {jobs} worker threads: {e}")))?;
    let stop = AtomicBool::new(false);
    let first_error: Mutex<Option<Error>> = Mutex::new(None);
    let writer = atomic::GroupSync::new(&dir);
    let results: Vec<(usize, Done)> = pool.install(|| {
        mine.par_iter()
            .map_init(Scratch::default, |scratch, &i| {
                if stop.load(Ordering::SeqCst) {
                    return (i, Done::NotStarted);
                }
                match process(&trials[i], config, &settings, &writer, scratch) {
                    Ok(done) => {
                        let reused = !matches!(done.outcome, TrialOutcome::Analysed);
                        progress.trial_done(&done.record, reused);
                        (i, Done::Record(Box::new(done)))
                    }
                    Err(e) => {
                        if !stop.swap(true, Ordering::SeqCst) {
                            if let Ok(mut first) = first_error.lock() {
                                *first = Some(e);
                            }
                        }
                        (i, Done::NotWritten)
                    }
                }
            })
            .collect()
    });
    progress.finish();
    let flushed = writer.finish();
    let mut outcome = BatchOutcome {
        stale,
        run_file: runfile::run_file_name(config.shard),
        ..BatchOutcome::default()
    };
    let c = &mut outcome.counts;
    c.trials = mine.len();
    c.stale_moved = outcome.stale.len();
    for (i, done) in results {
        let entry = &mut run.trials[i];
        match done {
            Done::Record(d) => {
                match d.outcome {
                    TrialOutcome::Analysed => c.analysed += 1,
                    TrialOutcome::Reused => c.reused += 1,
                    TrialOutcome::Rewritten => c.rewritten += 1,
                    TrialOutcome::Kept => c.kept += 1,
                    TrialOutcome::NotWritten | TrialOutcome::NotStarted => {}
                }
                match d.record.status {
                    Status::Ok => c.ok += 1,
                    Status::Flagged => c.flagged += 1,
                    Status::Error => c.errors += 1,
                }
                entry.outcome = Some(d.outcome);
                entry.status = Some(d.record.status);
                if let Some(note) = d.note {
                    outcome.kept.push((entry.trial.clone(), note));
                }
            }
            Done::NotWritten => {
                c.not_written += 1;
                entry.outcome = Some(TrialOutcome::NotWritten);
            }
            Done::NotStarted => {
                c.not_started += 1;
                entry.outcome = Some(TrialOutcome::NotStarted);
            }
        }
    }
    outcome.stopped = first_error.into_inner().ok().flatten().or(flushed.err());
    run.counts = outcome.counts.clone();
    run.stale = outcome.stale.clone();
    if let Some(e) = &outcome.stopped {
        run.stopped = Some(e.to_string());
        // The disk that refused a record will likely refuse this too; the cause is named once.
        let _ = runfile::write(out, &run);
        return Ok(outcome);
    }
    // In the pool, so that the tables' bootstraps use the workers asked for, no more.
    outcome.tables = pool.install(|| {
        let _tables = lock::tables_lock(out)?;
        let records = CampaignRecords::of_run(out, &run);
        tables::write_tables(out, &records, config.shard.is_some())
    })?;
    run.finished = Some(lock::now_rfc3339());
    runfile::write(out, &run)?;
    Ok(outcome)
}

enum Done {
    Record(Box<Processed>),
    NotWritten,
    NotStarted,
}

struct Processed {
    record: TrialRecord,
    outcome: TrialOutcome,
    /// Why the inputs could not be read, for a kept record.
    note: Option<String>,
}

/// One trial: its record reused, rewritten, kept or made anew. The inputs are read into the
/// worker's buffers, which go back to it whatever happens.
fn process(
    trial: &Discovered,
    config: &BatchConfig,
    settings: &str,
    writer: &atomic::GroupSync,
    scratch: &mut Scratch,
) -> Result<Processed> {
    let mut inputs = std::mem::take(&mut scratch.inputs);
    let processed = process_with(trial, config, settings, writer, scratch, &mut inputs);
    scratch.inputs = inputs;
    processed
}

fn process_with(
    trial: &Discovered,
    config: &BatchConfig,
    settings: &str,
    writer: &atomic::GroupSync,
    scratch: &mut Scratch,
    inputs: &mut TrialInputs,
) -> Result<Processed> {
    let spec = &trial.spec;
    let path = writer.dir().join(record_file_name(&spec.name));
    let existing = read_record(&path).filter(|r| r.trial == spec.name);
    let problem = trial
        .problem
        .clone()
        .or_else(|| discover::check_name(&spec.name).err());
    let read_error = match problem {
        Some(p) => {
            *inputs = TrialInputs::default();
            Some(Error::Usage(p))
        }
        None => pipeline::read_inputs_into(spec, inputs).err(),
    };
    let provenance = Provenance {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        audio_blake3: inputs.audio.as_deref().map(blake3_hex),
        frames_blake3: inputs.frames.as_deref().map(blake3_hex),
        video_blake3: inputs.video_blake3.clone(),
        settings_blake3: settings.to_string(),
    };
    let (audio_file, frames_file) = (path_string(&spec.audio), path_string(&spec.frames));
    let video_file = path_string(&spec.video);
    let same_manifest = |r: &TrialRecord| {
        r.group == spec.group
            && r.audio_file == audio_file
            && r.frames_file == frames_file
            && r.video_file == video_file
    };
    let done = |record, outcome| Processed {
        record,
        outcome,
        note: None,
    };
    if let Some(existing) = existing.filter(|e| e.status != Status::Error) {
        match &read_error {
            // The inputs are there but cannot be read now (a drive not mounted, no
            // permission): the earlier good record stays.
            Some(e @ Error::Io { .. }) => {
                return Ok(Processed {
                    record: existing,
                    outcome: TrialOutcome::Kept,
                    note: Some(e.to_string()),
                });
            }
            None if !config.force && existing.provenance == provenance => {
                if same_manifest(&existing) {
                    return Ok(done(existing, TrialOutcome::Reused));
                }
                let mut record = existing;
                record.group = spec.group.clone();
                record.audio_file = audio_file;
                record.frames_file = frames_file;
                record.video_file = video_file;
                writer.write(&path, report::json::record_json(&record).as_bytes())?;
                return Ok(done(record, TrialOutcome::Rewritten));
            }
            _ => {}
        }
    }
    let mut record = match read_error {
        Some(e) => {
            let message = match e {
                Error::Usage(m) => m,
                e => e.to_string(),
            };
            let mut r = TrialRecord::failed(&spec.name, spec.group.as_deref(), message);
            r.audio_file = audio_file;
            r.frames_file = frames_file;
            r.video_file = video_file;
            r
        }
        None => {
            let analysed = std::panic::catch_unwind(AssertUnwindSafe(|| {
                let (record, measures) =
                    pipeline::analyze_in_place(spec, inputs, &config.rig, scratch);
                write_measures(&path, measures.as_ref()).map(|()| record)
            }));
            analysed.unwrap_or_else(|panic| {
                let what = crate::error::panic_message(panic.as_ref());
                *scratch = Scratch::default();
                Ok(TrialRecord::failed(
                    &spec.name,
                    spec.group.as_deref(),
                    format!(
                        "internal error while analysing trial {}: {what} (please report this bug)",
                        spec.name
                    ),
                ))
            })?
        }
    };
    record.provenance = provenance;
    let text = report::json::record_json(&record);
    // An error record written before, word for word, is current: no need to write it again.
    let unchanged = !config.force
        && record.status == Status::Error
        && read_record(&path).is_some_and(|old| old == record);
    if unchanged {
        return Ok(done(record, TrialOutcome::Reused));
    }
    writer.write(&path, text.as_bytes())?;
    Ok(done(record, TrialOutcome::Analysed))
}

/// Writes a video's per-frame measures beside its record (`NAME.json` -> `NAME.frames.csv`).
fn write_measures(record_path: &Path, measures: Option<&pipeline::VideoMeasures>) -> Result<()> {
    match measures {
        Some(m) => atomic::write_atomic(
            &record_path.with_extension("frames.csv"),
            report::measures::measures_csv(m).as_bytes(),
        ),
        None => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_partition_names_exactly_once() {
        let names: Vec<String> = (0..500).map(|i| format!("trial-{i}")).collect();
        for n in [1u64, 2, 3, 7] {
            for name in &names {
                let hits = (1..=n).filter(|k| in_shard(name, *k, n)).count();
                assert_eq!(hits, 1);
            }
        }
    }
}
