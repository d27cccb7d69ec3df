//! `summary.csv` and `groups.csv` over exactly the campaign's records, made with one set of
//! settings. Records are read one at a time. When records of other settings or another version
//! are among them, the tables are not written, and outdated ones are removed: a table that
//! mixes settings, or describes records that were since replaced, is worse than none.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::report;

use super::offset::{self, OffsetSuggestion};
use super::runfile::{self, RunFile};
use super::{atomic, read_record, trials_dir, ResultsFolder};

/// The records that make up a campaign.
#[derive(Debug, Clone, Default)]
pub struct CampaignRecords {
    /// (trial name, record path), in trial order; the name is unknown in a folder without a
    /// run file.
    pub records: Vec<(Option<String>, PathBuf)>,
    /// The run file the campaign was read from, if any.
    pub run: Option<RunFile>,
}

impl CampaignRecords {
    /// The records of the trials of `run`.
    pub fn of_run(dir: &Path, run: &RunFile) -> Self {
        let trials = trials_dir(dir);
        CampaignRecords {
            records: run
                .trials
                .iter()
                .map(|t| (Some(t.trial.clone()), trials.join(&t.record)))
                .collect(),
            run: Some(run.clone()),
        }
    }
}

/// The campaign of a results folder: from its newest run file, or, in a folder made by an
/// older version, every record in `trials/`.
pub fn campaign_records(dir: &Path) -> Result<CampaignRecords> {
    if let Some(c) = runfile::campaign(dir)? {
        return Ok(CampaignRecords::of_run(dir, &c.run));
    }
    let trials = trials_dir(dir);
    let mut paths: Vec<PathBuf> = std::fs::read_dir(&trials)
        .map_err(|e| Error::io(&trials, e))?
        .flatten()
        .filter(|e| e.file_type().is_ok_and(|t| t.is_file()))
        .map(|e| e.path())
        .filter(|p| {
            p.extension().is_some_and(|e| e == "json")
                && !p
                    .file_name()
                    .is_some_and(|n| n.to_string_lossy().starts_with('.'))
        })
        .collect();
    paths.sort();
    Ok(CampaignRecords {
        records: paths.into_iter().map(|p| (None, p)).collect(),
        run: None,
    })
}

/// Records made with other settings or another version than the campaign's.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MixedSettings {
    /// Records read.
    pub records: usize,
    /// The campaign's settings BLAKE3 and version (the run file's, or the most common).
    pub expected: (String, String),
    /// Other (settings BLAKE3, version) and how many records have each, most first.
    pub others: Vec<((String, String), usize)>,
    /// Up to 10 of the trials concerned.
    pub examples: Vec<String>,
}

impl MixedSettings {
    /// How many records differ.
    pub fn count(&self) -> usize {
        self.others.iter().map(|o| o.1).sum()
    }
}

/// What became of the tables.
#[derive(Debug, Clone, Default)]
pub enum Tables {
    /// Not attempted (the run stopped).
    #[default]
    Skipped,
    Written {
        /// Record files that could not be read, left out.
        unreadable: Vec<PathBuf>,
        /// Trials of the campaign with no record, left out.
        missing: Vec<String>,
        /// The offset the clean trials suggest, when they disagree with the rig.
        suggestion: Option<OffsetSuggestion>,
    },
    /// Refused: records of several settings. Outdated tables were removed.
    Mixed(MixedSettings),
    /// A shard finished while other shards' trials have no record yet; outdated tables were
    /// removed, and the last shard to finish writes them.
    Waiting { missing: usize },
}

fn remove_tables(dir: &Path) {
    for name in ["summary.csv", "groups.csv"] {
        let _ = std::fs::remove_file(dir.join(name));
    }
}

/// Writes `summary.csv` and `groups.csv` of `records` into `dir`. With `require_complete`
/// (a shard) they are written only when every trial has a record.
pub(crate) fn write_tables(
    dir: &Path,
    records: &CampaignRecords,
    require_complete: bool,
) -> Result<Tables> {
    let summary = dir.join("summary.csv");
    let csv_err = |e: csv::Error| Error::malformed(&summary, e.to_string());
    let mut unreadable = Vec::new();
    let mut missing = Vec::new();
    let mut groups = report::groups::GroupTable::default();
    let mut residuals = offset::Residuals::default();
    let mut versions: BTreeMap<(String, String), (usize, Vec<String>)> = BTreeMap::new();
    let mut read = 0;
    let mut buf = Vec::new();
    {
        let mut w = csv::Writer::from_writer(&mut buf);
        w.write_record(report::csv::summary_columns())
            .map_err(csv_err)?;
        for (name, path) in &records.records {
            if std::fs::symlink_metadata(path).is_err() {
                missing.extend(name.clone());
                continue;
            }
            let Some(r) = read_record(path).filter(|r| name.as_ref().is_none_or(|n| *n == r.trial))
            else {
                unreadable.push(path.clone());
                continue;
            };
            read += 1;
            let key = (
                r.provenance.settings_blake3.clone(),
                r.provenance.tool_version.clone(),
            );
            let entry = versions.entry(key).or_default();
            entry.0 += 1;
            if entry.1.len() < 10 {
                entry.1.push(r.trial.clone());
            }
            w.write_record(report::csv::summary_row(&r))
                .map_err(csv_err)?;
            groups.add(&r);
            residuals.add(&r);
        }
        w.flush().map_err(|e| Error::io(&summary, e))?;
    }
    let expected = match &records.run {
        Some(run) => (run.settings_blake3.clone(), run.tool_version.clone()),
        None => versions
            .iter()
            .max_by_key(|(_, (n, _))| *n)
            .map(|(k, _)| k.clone())
            .unwrap_or_default(),
    };
    let mut others: Vec<((String, String), usize)> = Vec::new();
    let mut examples = Vec::new();
    for (key, (n, names)) in versions {
        if key != expected {
            others.push((key, n));
            examples.extend(names);
        }
    }
    if !others.is_empty() {
        others.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
        examples.sort();
        examples.truncate(10);
        remove_tables(dir);
        return Ok(Tables::Mixed(MixedSettings {
            records: read,
            expected,
            others,
            examples,
        }));
    }
    if require_complete && !missing.is_empty() {
        remove_tables(dir);
        return Ok(Tables::Waiting {
            missing: missing.len(),
        });
    }
    atomic::write_atomic(&summary, &buf)?;
    // The bootstraps are the tables' main cost, and each group's measures are independent.
    groups.compute_stats(|samples| {
        samples
            .par_iter()
            .map(|v| report::groups::stats(v))
            .collect()
    });
    let groups_path = dir.join("groups.csv");
    let mut gbuf = Vec::new();
    groups
        .write(&mut gbuf)
        .map_err(|e| Error::malformed(&groups_path, e.to_string()))?;
    atomic::write_atomic(&groups_path, &gbuf)?;
    let suggestion = records
        .run
        .as_ref()
        .and_then(|run| offset::suggest(&residuals, run.settings.video_offset_s));
    Ok(Tables::Written {
        unreadable,
        missing,
        suggestion,
    })
}

/// Rebuilds `summary.csv` and `groups.csv` of a held results folder from the records of its
/// campaign.
pub fn summarize(folder: &ResultsFolder) -> Result<(Tables, CampaignRecords)> {
    let records = campaign_records(folder.dir())?;
    let tables = write_tables(folder.dir(), &records, false)?;
    Ok((tables, records))
}
