//! The review report: `report.html` and one figure per trial in `plots/`.

use std::collections::HashSet;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::measure::Status;
use crate::report;
use crate::rig::RigProfile;

use super::{atomic, read_record, CampaignRecords, ResultsFolder};

/// Counts of a written review report.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ReportOutcome {
    pub trials: usize,
    /// Trials whose input files could not be read again (their figures show the record only).
    pub inputs_missing: usize,
    /// Figures of trials no longer in the campaign, removed.
    pub stale_figures: usize,
}

fn remove_stale_figures(plots: &Path, keep: &HashSet<String>) -> usize {
    let Ok(entries) = std::fs::read_dir(plots) else {
        return 0;
    };
    let mut removed = 0;
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let ours = name.ends_with(".svg") && !name.starts_with('.') && !keep.contains(&name);
        if ours && std::fs::remove_file(entry.path()).is_ok() {
            removed += 1;
        }
    }
    removed
}

/// A video trial's measures as written beside its record (`NAME.frames.csv`), with the
/// columns that fed its detectors.
fn video_measures(
    record_path: &Path,
    record: &crate::measure::TrialRecord,
) -> Option<crate::signal::FrameSeries> {
    let input = record.video_input.as_ref()?;
    let csv = record_path.with_extension("frames.csv");
    let bytes = std::fs::read(&csv).ok()?;
    let options = crate::decode::FrameOptions {
        motion_column: Some(input.measure.clone()),
        loading_column: Some(input.loading_measure.clone()),
        fps: None,
    };
    crate::decode::decode_frames(&csv, &bytes, &options).ok()
}

/// Writes `report.html` and `plots/NAME.svg` of a held results folder from the records of
/// `campaign`, re-reading each trial's inputs (paths as recorded) to draw the evidence with
/// `rig`, the settings the records were made with. One trial is held at a time. Figures of
/// trials no longer in the campaign are removed.
pub fn write_report(
    folder: &ResultsFolder,
    campaign: &CampaignRecords,
    rig: &RigProfile,
) -> Result<ReportOutcome> {
    use report::html::{ReviewPage, TrialRow};
    let out_dir = folder.dir();
    let plots = out_dir.join("plots");
    std::fs::create_dir_all(&plots).map_err(|e| Error::io(&plots, e))?;
    let mut figures = HashSet::new();
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
    for (_, path) in &campaign.records {
        let Some(record) = read_record(path) else {
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
        let frames = load(&record.frames_file)
            .and_then(|(p, bytes)| match bytes {
                Ok(b) => crate::decode::decode_frames(&p, &b, &options).ok(),
                Err(_) => None,
            })
            .or_else(|| video_measures(path, &record));
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
                .map_err(|e| Error::malformed(path, format!("cannot draw the figure: {e}")))?;
        let figure_name = format!("{stem}.svg");
        figures.insert(figure_name.clone());
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
    outcome.stale_figures = remove_stale_figures(&plots, &figures);
    Ok(outcome)
}
