//! Campaigns: discovery, parallel analysis (rayon, one worker per job), resume, sharding and the
//! summary table. Every record is written atomically as soon as its trial is done, so a killed
//! run leaves only complete records; `summary.csv` is rebuilt from the records. A trial is
//! skipped on a re-run when its record was made from the same input bytes, the same effective
//! settings and the same tool version (SHA-256 of each, stored in the record).

pub mod atomic;
pub mod discover;

use std::collections::HashSet;
use std::panic::AssertUnwindSafe;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use sha2::{Digest, Sha256};

use crate::error::{Error, Result};
use crate::measure::{Provenance, Status, TrialRecord};
use crate::pipeline::{self, Scratch, TrialInputs};
use crate::report;
use crate::rig::RigProfile;
pub use discover::{discover, Discovered};

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
}

/// Receives progress events; the CLI draws them. Called from worker threads.
pub trait Progress: Sync {
    /// The batch has `total` trials to go through.
    fn start(&self, total: usize);
    /// One trial is finished; `reused` when its existing record was current.
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

/// Counts of one batch run.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct BatchOutcome {
    pub trials: usize,
    pub analysed: usize,
    pub reused: usize,
    pub ok: usize,
    pub flagged: usize,
    pub errors: usize,
}

/// Lower-case hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    format!("{:x}", Sha256::digest(bytes))
}

/// SHA-256 of the effective settings (the rig profile after command-line overrides).
pub fn settings_hash(rig: &RigProfile) -> String {
    sha256_hex(serde_json::to_string(rig).unwrap_or_default().as_bytes())
}

/// Whether `name` falls in shard `k` of `n` (1-based): stable under adding other trials.
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

fn record_file_name(name: &str) -> String {
    format!("{name}.json")
}

/// Runs a batch over discovered trials. Fails only when the output folder cannot be written.
pub fn run(
    trials: Vec<Discovered>,
    config: &BatchConfig,
    progress: &dyn Progress,
) -> Result<BatchOutcome> {
    let dir = trials_dir(&config.out_dir);
    std::fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, e))?;
    let trials: Vec<Discovered> = match config.shard {
        Some((k, n)) => trials
            .into_iter()
            .filter(|t| in_shard(&t.spec.name, k, n))
            .collect(),
        None => trials,
    };
    let owned: HashSet<String> = trials
        .iter()
        .map(|t| record_file_name(&file_stem_for(&t.spec.name)))
        .collect();
    atomic::remove_stale_temps(&dir, &owned);
    let settings = settings_hash(&config.rig);
    progress.start(trials.len());
    let jobs = if config.jobs == 0 {
        std::thread::available_parallelism().map_or(1, |n| n.get())
    } else {
        config.jobs
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(jobs)
        .build()
        .map_err(|e| Error::Usage(format!("cannot start {jobs} worker threads: {e}")))?;
    let results: Vec<Result<(Status, bool)>> = pool.install(|| {
        trials
            .par_iter()
            .map_init(Scratch::default, |scratch, trial| {
                let (record, reused) = process(trial, config, &settings, &dir, scratch)?;
                progress.trial_done(&record, reused);
                Ok((record.status, reused))
            })
            .collect()
    });
    progress.finish();
    let mut outcome = BatchOutcome {
        trials: trials.len(),
        ..BatchOutcome::default()
    };
    for r in results {
        let (status, reused) = r?;
        if reused {
            outcome.reused += 1;
        } else {
            outcome.analysed += 1;
        }
        match status {
            Status::Ok => outcome.ok += 1,
            Status::Flagged => outcome.flagged += 1,
            Status::Error => outcome.errors += 1,
        }
    }
    Ok(outcome)
}

/// The file stem used for a trial's record: the name itself when safe, else a stand-in.
fn file_stem_for(name: &str) -> String {
    match discover::check_name(name) {
        Ok(()) => name.to_string(),
        Err(_) => discover::safe_stand_in(name),
    }
}

fn process(
    trial: &Discovered,
    config: &BatchConfig,
    settings: &str,
    dir: &Path,
    scratch: &mut Scratch,
) -> Result<(TrialRecord, bool)> {
    let spec = &trial.spec;
    let stem = file_stem_for(&spec.name);
    let path = dir.join(record_file_name(&stem));
    let problem = trial
        .problem
        .clone()
        .or_else(|| discover::check_name(&spec.name).err());
    let (inputs, read_error) = match pipeline::read_inputs(spec) {
        Ok(inputs) => (inputs, None),
        Err(e) => (TrialInputs::default(), Some(e.to_string())),
    };
    let provenance = Provenance {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        audio_sha256: inputs.audio.as_deref().map(sha256_hex),
        frames_sha256: inputs.frames.as_deref().map(sha256_hex),
        settings_sha256: settings.to_string(),
    };
    if !config.force && problem.is_none() && read_error.is_none() {
        if let Some(existing) = std::fs::read_to_string(&path)
            .ok()
            .and_then(|text| report::json::parse_record(&text).ok())
        {
            if existing.provenance == provenance && existing.trial == spec.name {
                return Ok((existing, true));
            }
        }
    }
    let mut record = match problem.or(read_error) {
        Some(message) => {
            let mut r = TrialRecord::failed(&spec.name, spec.group.as_deref(), message);
            r.audio_file = spec.audio.as_deref().map(|p| p.display().to_string());
            r.frames_file = spec.frames.as_deref().map(|p| p.display().to_string());
            r
        }
        None => {
            let analysed = std::panic::catch_unwind(AssertUnwindSafe(|| {
                pipeline::analyze(spec, &inputs, &config.rig, scratch)
            }));
            analysed.unwrap_or_else(|panic| {
                let what = crate::error::panic_message(panic.as_ref());
                *scratch = Scratch::default();
                TrialRecord::failed(
                    &spec.name,
                    spec.group.as_deref(),
                    format!(
                        "internal error while analysing trial {}: {what} (please report this bug)",
                        spec.name
                    ),
                )
            })
        }
    };
    record.provenance = provenance;
    atomic::write_atomic(&path, report::json::record_json(&record).as_bytes())?;
    Ok((record, false))
}

/// Rebuilds `summary.csv` and `groups.csv` in `out_dir` from the records in `out_dir/trials`,
/// in name order, reading one record at a time. Unreadable record files are skipped and
/// returned.
pub fn write_summary(out_dir: &Path) -> Result<Vec<PathBuf>> {
    let paths = record_paths(out_dir)?;
    let summary = out_dir.join("summary.csv");
    let csv_err = |e: csv::Error| Error::malformed(&summary, e.to_string());
    let mut unreadable = Vec::new();
    let mut groups = report::groups::GroupTable::default();
    let mut buf = Vec::new();
    {
        let mut w = csv::Writer::from_writer(&mut buf);
        w.write_record(report::csv::SUMMARY_COLUMNS)
            .map_err(csv_err)?;
        for p in paths {
            match std::fs::read_to_string(&p)
                .ok()
                .and_then(|t| report::json::parse_record(&t).ok())
            {
                Some(r) => {
                    w.write_record(report::csv::summary_row(&r))
                        .map_err(csv_err)?;
                    groups.add(&r);
                }
                None => unreadable.push(p),
            }
        }
        w.flush().map_err(|e| Error::io(&summary, e))?;
    }
    atomic::write_atomic(&summary, &buf)?;
    let groups_path = out_dir.join("groups.csv");
    let mut gbuf = Vec::new();
    groups
        .write(&mut gbuf)
        .map_err(|e| Error::malformed(&groups_path, e.to_string()))?;
    atomic::write_atomic(&groups_path, &gbuf)?;
    Ok(unreadable)
}

/// Counts of a written review report.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ReportOutcome {
    pub trials: usize,
    /// Trials whose input files could not be read again (their figures show the record only).
    pub inputs_missing: usize,
}

fn record_paths(out_dir: &Path) -> Result<Vec<PathBuf>> {
    let dir = trials_dir(out_dir);
    let mut paths: Vec<PathBuf> = std::fs::read_dir(&dir)
        .map_err(|e| Error::io(&dir, e))?
        .flatten()
        .map(|e| e.path())
        .filter(|p| {
            p.extension().is_some_and(|e| e == "json")
                && !p
                    .file_name()
                    .is_some_and(|n| n.to_string_lossy().starts_with('.'))
        })
        .collect();
    paths.sort();
    Ok(paths)
}

/// Writes `out_dir/report.html` and `out_dir/plots/NAME.svg` from the records, re-reading each
/// trial's inputs (paths as recorded) to draw the evidence. One trial is held at a time.
pub fn write_report(out_dir: &Path, rig: &RigProfile) -> Result<ReportOutcome> {
    use report::html::{ReviewPage, TrialRow};
    let plots = out_dir.join("plots");
    std::fs::create_dir_all(&plots).map_err(|e| Error::io(&plots, e))?;
    let mut outcome = ReportOutcome::default();
    let mut page = ReviewPage {
        title: format!("latchtime review: {}", out_dir.display()),
        ..ReviewPage::default()
    };
    let mut flag_counts = vec![0usize; report::groups::FLAGS.len()];
    let mut by_group: std::collections::BTreeMap<String, [Vec<f64>; 3]> = Default::default();
    let mut residuals = Vec::new();
    let mut tolerances = Vec::new();
    let options = crate::decode::FrameOptions::from(rig);
    for path in record_paths(out_dir)? {
        let Some(record) = std::fs::read_to_string(&path)
            .ok()
            .and_then(|t| report::json::parse_record(&t).ok())
        else {
            continue;
        };
        outcome.trials += 1;
        let stem = path
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let load =
            |file: &Option<String>| file.as_ref().map(|f| (PathBuf::from(f), std::fs::read(f)));
        let audio = load(&record.audio_file).and_then(|(p, bytes)| match bytes {
            Ok(b) => crate::decode::decode_audio(&p, &b, rig.audio_channel).ok(),
            Err(_) => None,
        });
        let frames = load(&record.frames_file).and_then(|(p, bytes)| match bytes {
            Ok(b) => crate::decode::decode_frames(&p, &b, &options).ok(),
            Err(_) => None,
        });
        if (record.audio_file.is_some() && audio.is_none())
            || (record.frames_file.is_some() && frames.is_none())
        {
            outcome.inputs_missing += 1;
        }
        // Frames are drawn on the fitted frame clock, as the detectors saw them.
        let frames = frames.map(|mut f| {
            f.time_s = crate::detect::clock::frame_clock(&f).time_s;
            f
        });
        let offset_s = rig.video_offset_s + rig.acoustic_delay_s();
        let figure =
            report::plots::trial_figure(&record, audio.as_ref(), frames.as_ref(), offset_s)
                .map_err(|e| Error::malformed(&path, format!("cannot draw the figure: {e}")))?;
        let figure_name = format!("{stem}.svg");
        atomic::write_atomic(&plots.join(&figure_name), figure.as_bytes())?;
        for (i, f) in report::groups::FLAGS.iter().enumerate() {
            if record.flags.contains(f) {
                flag_counts[i] += 1;
            }
        }
        if record.status != Status::Error {
            let g = by_group
                .entry(record.group.clone().unwrap_or_else(|| "(none)".into()))
                .or_default();
            for (k, v) in [record.loading_ms, record.release_ms, record.amplification]
                .into_iter()
                .enumerate()
            {
                if let Some(v) = v.filter(|v| v.is_finite()) {
                    g[k].push(v);
                }
            }
        }
        if let Some(sync) = &record.sync {
            residuals.push((residuals.len() as f64, sync.residual_ms));
            tolerances.push(sync.tolerance_ms);
        }
        page.rows.push(TrialRow::from_record(&record, figure_name));
    }
    page.flag_counts = report::groups::FLAGS
        .iter()
        .zip(flag_counts)
        .map(|(f, n)| (f.as_str().to_string(), n))
        .collect();
    for (k, title) in [
        "loading_ms by group",
        "release_ms by group",
        "amplification by group",
    ]
    .iter()
    .enumerate()
    {
        let data: Vec<report::plots::StripGroup> = by_group
            .iter()
            .map(|(g, v)| {
                let summary = report::groups::stats(&v[k]).map(|s| (s.mean, s.ci_low, s.ci_high));
                (g.clone(), v[k].clone(), summary)
            })
            .collect();
        let chart = report::plots::strip_chart(title, &data)
            .map_err(|e| Error::malformed(out_dir, format!("cannot draw {title}: {e}")))?;
        page.group_charts.push(chart);
    }
    if !residuals.is_empty() {
        let tolerance = crate::detect::median(&tolerances);
        page.residual_chart = Some(
            report::plots::residual_chart(&residuals, tolerance).map_err(|e| {
                Error::malformed(out_dir, format!("cannot draw the clock residuals: {e}"))
            })?,
        );
    }
    atomic::write_atomic(
        &out_dir.join("report.html"),
        report::html::render(&page).as_bytes(),
    )?;
    Ok(outcome)
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
