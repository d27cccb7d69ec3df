//! The run file: what one batch run was asked to do and what it did. `DIR/run.json` for a run
//! over the whole campaign, `DIR/run.shard-K-of-N.json` for each shard. It holds the tool
//! version, the effective settings and their BLAKE3, the command, the campaign's trials (name,
//! group, input paths; every trial, also those of other shards), start and end times, counts and
//! each trial's outcome in this run. `summarize` and `report` read the campaign and its
//! settings from it. The file is written when a run starts and again when it ends; it is the one
//! output that holds times.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::measure::Status;
use crate::rig::RigProfile;

use super::atomic;

/// Name of the run file of a whole-campaign run.
pub const RUN_FILE: &str = "run.json";

/// What happened to one trial in a run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TrialOutcome {
    /// Analysed; its record written.
    Analysed,
    /// Its record was current and kept as it was.
    Reused,
    /// Its record was current but its group or input paths changed in the manifest: the
    /// record was rewritten with them, without a new analysis.
    Rewritten,
    /// Its inputs could not be read; the earlier record was kept.
    Kept,
    /// Analysed, but the record could not be written (the run stopped).
    NotWritten,
    /// Not started: the run stopped after a failed write.
    NotStarted,
}

/// One trial of the campaign.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunTrial {
    pub trial: String,
    pub group: Option<String>,
    pub audio: Option<String>,
    pub frames: Option<String>,
    /// Record file name inside `trials/`.
    pub record: String,
    /// What this run did with it; null for trials of other shards.
    pub outcome: Option<TrialOutcome>,
    /// The record's status after this run, when it has one.
    pub status: Option<Status>,
}

/// Counts of one run.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct RunCounts {
    /// Trials this run was responsible for (its shard's, or all).
    pub trials: usize,
    pub analysed: usize,
    pub reused: usize,
    pub rewritten: usize,
    pub kept: usize,
    pub not_written: usize,
    pub not_started: usize,
    pub ok: usize,
    pub flagged: usize,
    pub errors: usize,
    /// Records of trials no longer in the campaign, moved to `trials/stale/`.
    pub stale_moved: usize,
}

/// How the run was started, to tell a person how to run it again.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Invocation {
    /// Arguments after the program name, as given.
    pub args: Vec<String>,
    /// Folder the run was started in (relative paths are relative to it).
    pub working_dir: PathBuf,
}

/// The run file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunFile {
    pub tool: String,
    pub tool_version: String,
    pub invocation: Invocation,
    /// Shard K of N, when the run was one.
    pub shard: Option<(u64, u64)>,
    pub settings: RigProfile,
    /// BLAKE3 of the settings (SHA-256 in run files of earlier versions, read under this name).
    #[serde(alias = "settings_sha256")]
    pub settings_blake3: String,
    pub host: String,
    pub pid: u32,
    pub started: String,
    /// Null while running, or when the run was killed.
    pub finished: Option<String>,
    /// Why the run stopped early, if it did.
    pub stopped: Option<String>,
    pub counts: RunCounts,
    /// Every trial of the campaign, in name order.
    pub trials: Vec<RunTrial>,
    /// Record files moved to `trials/stale/` by this run.
    pub stale: Vec<String>,
}

/// The run file name for a run over `shard`.
pub fn run_file_name(shard: Option<(u64, u64)>) -> String {
    match shard {
        None => RUN_FILE.to_string(),
        Some((k, n)) => format!("run.shard-{k}-of-{n}.json"),
    }
}

/// Shard (K, N) of a shard run file name.
fn shard_of(name: &str) -> Option<(u64, u64)> {
    let rest = name.strip_prefix("run.shard-")?.strip_suffix(".json")?;
    let (k, n) = rest.split_once("-of-")?;
    Some((k.parse().ok()?, n.parse().ok()?))
}

/// Run files in `dir`: (file name, shard), in name order.
pub fn run_files(dir: &Path) -> Vec<(String, Option<(u64, u64)>)> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    let mut found: Vec<(String, Option<(u64, u64)>)> = entries
        .flatten()
        .filter_map(|e| {
            let name = e.file_name().to_string_lossy().into_owned();
            if name == RUN_FILE {
                Some((name, None))
            } else {
                shard_of(&name).map(|s| (name, Some(s)))
            }
        })
        .collect();
    found.sort();
    found
}

/// Writes `run` as `dir/<its run file name>`.
pub fn write(dir: &Path, run: &RunFile) -> Result<()> {
    let path = dir.join(run_file_name(run.shard));
    let mut text = serde_json::to_string_pretty(run)
        .map_err(|e| Error::malformed(&path, format!("cannot write the run file: {e}")))?;
    text.push('\n');
    atomic::write_atomic(&path, text.as_bytes())
}

/// Reads the run file `dir/name`.
pub fn read(dir: &Path, name: &str) -> Result<RunFile> {
    let path = dir.join(name);
    let bytes = crate::pipeline::read_bounded(&path, 1 << 30, false)?;
    serde_json::from_slice(&bytes)
        .map_err(|e| Error::malformed(&path, format!("not a latchtime run file: {e}")))
}

/// Removes run files of other runs that this one supersedes: a whole-campaign run supersedes
/// every shard's, a shard run the whole-campaign one and those of another shard count.
pub fn remove_superseded(dir: &Path, shard: Option<(u64, u64)>) {
    for (name, other) in run_files(dir) {
        let superseded = match (shard, other) {
            (None, Some(_)) => true,
            (Some(_), None) => true,
            (Some((_, n)), Some((_, m))) => n != m,
            (None, None) => false,
        };
        if superseded {
            let _ = std::fs::remove_file(dir.join(name));
        }
    }
}

/// The campaign a results folder describes: the newest run file's trials and settings, and
/// every run file it was read from.
#[derive(Debug, Clone)]
pub struct Campaign {
    /// The run file whose trial list and settings are the campaign's (the latest started).
    pub run: RunFile,
    /// Names of all run files read.
    pub files: Vec<String>,
}

/// The campaign of `dir`, or `None` when the folder has no run file (made by an older
/// version). Run files that cannot be read are an error naming them.
pub fn campaign(dir: &Path) -> Result<Option<Campaign>> {
    let names = run_files(dir);
    let mut newest: Option<RunFile> = None;
    for (name, _) in &names {
        let run = read(dir, name)?;
        if newest.as_ref().is_none_or(|n| run.started > n.started) {
            newest = Some(run);
        }
    }
    Ok(newest.map(|run| Campaign {
        run,
        files: names.into_iter().map(|(n, _)| n).collect(),
    }))
}
