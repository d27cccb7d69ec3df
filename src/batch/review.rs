//! The review report: `report.html` and one figure per trial in `plots/`.

use std::collections::{BTreeMap, HashMap, HashSet};
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

/// Where a trial's recording time came from, in order of preference.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum TimeSource {
    /// The Broadcast WAV `bext` origination date and time reference.
    Bext,
    /// The manifest's `recorded_at` column.
    Manifest,
    /// The input file's modification time.
    FileTime,
}

impl TimeSource {
    fn describe(self) -> &'static str {
        match self {
            TimeSource::Bext => "Broadcast WAV time reference",
            TimeSource::Manifest => "manifest column recorded_at",
            TimeSource::FileTime => "file modification time",
        }
    }
}

fn seconds_since_epoch(t: std::time::SystemTime) -> Option<f64> {
    t.duration_since(std::time::UNIX_EPOCH)
        .ok()
        .map(|d| d.as_secs_f64())
}

/// Seconds since the Unix epoch of a date and time as people write them (`2026-03-01
/// 22:15:00`, `2026-03-01T22:15:00Z`), read as UTC.
pub fn parse_time(text: &str) -> Option<f64> {
    let text = text.trim();
    let full = if text.len() == 10 {
        format!("{text} 00:00:00")
    } else {
        text.to_string()
    };
    humantime::parse_rfc3339_weak(&full)
        .ok()
        .and_then(seconds_since_epoch)
}

/// The input the campaign's batch ran over, when it was a manifest file: the first argument
/// after `batch` that is neither an option nor an option's value.
fn manifest_path(run: &super::RunFile) -> Option<PathBuf> {
    const SWITCHES: [&str; 5] = ["--force", "--recursive", "--quiet", "--strict", "--report"];
    let args = &run.invocation.args;
    let start = args.iter().position(|a| a == "batch")? + 1;
    let mut takes_value = false;
    for a in &args[start..] {
        if takes_value {
            takes_value = false;
        } else if a.starts_with("--") {
            takes_value = !a.contains('=') && !SWITCHES.contains(&a.as_str());
        } else {
            let path = run.invocation.working_dir.join(a);
            return path.is_file().then_some(path);
        }
    }
    None
}

/// The manifest's `recorded_at` per trial, seconds since the epoch; empty without a manifest or
/// without that column. A value that cannot be read leaves its trial to the next source.
fn manifest_times(run: Option<&super::RunFile>) -> HashMap<String, f64> {
    let Some(path) = run.and_then(manifest_path) else {
        return HashMap::new();
    };
    let Ok(mut reader) = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .flexible(true)
        .from_path(&path)
    else {
        return HashMap::new();
    };
    let Ok(headers) = reader.headers().cloned() else {
        return HashMap::new();
    };
    let col = |name: &str| headers.iter().position(|h| h == name);
    let (Some(trial), Some(at)) = (col("trial"), col("recorded_at")) else {
        return HashMap::new();
    };
    reader
        .records()
        .flatten()
        .filter_map(|r| Some((r.get(trial)?.to_string(), parse_time(r.get(at)?)?)))
        .collect()
}

/// A trial's recording time (seconds since the epoch) and where it came from.
fn recording_time(
    record: &crate::measure::TrialRecord,
    manifest: &HashMap<String, f64>,
) -> Option<(f64, TimeSource)> {
    let bext = record.recording.as_ref().and_then(|r| {
        let day = parse_time(r.origination_date.as_deref()?)?;
        Some(day + r.start_s_since_midnight)
    });
    if let Some(t) = bext {
        return Some((t, TimeSource::Bext));
    }
    if let Some(t) = manifest.get(&record.trial) {
        return Some((*t, TimeSource::Manifest));
    }
    let file = record.audio_file.as_ref().or(record.frames_file.as_ref())?;
    let modified = std::fs::metadata(file).and_then(|m| m.modified()).ok()?;
    Some((seconds_since_epoch(modified)?, TimeSource::FileTime))
}

/// The measures drawn per group on the page: (title, axis title, value).
const PAGE_MEASURES: [(&str, &str, MeasureFn); 3] = [
    ("Loading time by group", "loading_ms, ms", |r| r.loading_ms),
    ("Release duration by group", "release_ms, ms", |r| {
        r.release_ms
    }),
    ("Amplification by group", "amplification", |r| {
        r.amplification
    }),
];
type MeasureFn = fn(&crate::measure::TrialRecord) -> Option<f64>;

/// One trial's clock residual and its recording time.
struct Residual {
    point: report::charts::Point,
    tolerance_ms: f64,
    time: Option<(f64, TimeSource)>,
}

/// The residual chart over recording time, and the page's note on where the times came from.
fn residual_chart(mut residuals: Vec<Residual>) -> Result<Option<(String, String)>> {
    let timed: Vec<f64> = residuals
        .iter()
        .filter_map(|r| r.time.map(|t| t.0))
        .collect();
    let Some(first) = timed.iter().copied().reduce(f64::min) else {
        return Ok(None);
    };
    let tolerances: Vec<f64> = residuals.iter().map(|r| r.tolerance_ms).collect();
    let tolerance = crate::detect::median(&tolerances);
    let mut sources: Vec<TimeSource> = residuals
        .iter()
        .filter_map(|r| r.time.map(|t| t.1))
        .collect();
    sources.sort();
    let mut named = Vec::new();
    for s in [TimeSource::Bext, TimeSource::Manifest, TimeSource::FileTime] {
        let n = sources.iter().filter(|x| **x == s).count();
        if n > 0 {
            named.push(format!("{} ({n})", s.describe()));
        }
    }
    let untimed = residuals.len() - timed.len();
    let mut note = format!("Recording time from: {}.", named.join(", "));
    if untimed > 0 {
        note.push_str(&format!(
            " {untimed} trial(s) without a recording time are not drawn."
        ));
    }
    let start = std::time::UNIX_EPOCH + std::time::Duration::from_secs_f64(first.max(0.0));
    let span_s = timed.iter().fold(0.0f64, |m, t| m.max(t - first));
    let (unit, per_s) = time_unit(span_s);
    let x_desc = format!(
        "{unit} since the first recording, {}",
        humantime::format_rfc3339_seconds(start)
    );
    let points: Vec<report::charts::Point> = residuals
        .iter_mut()
        .filter_map(|r| {
            let (t, _) = r.time?;
            r.point.x = (t - first) / per_s;
            Some(r.point.clone())
        })
        .collect();
    let svg = report::charts::residual_chart(&points, tolerance, &x_desc, unit).map_err(|e| {
        Error::malformed(
            Path::new("report.html"),
            format!("cannot draw the clock residuals: {e}"),
        )
    })?;
    Ok(Some((svg, note)))
}

/// The unit a time axis spanning `span_s` reads best in, and its length in seconds: seconds
/// up to two minutes, minutes up to two hours, then hours.
fn time_unit(span_s: f64) -> (&'static str, f64) {
    if span_s < 120.0 {
        ("seconds", 1.0)
    } else if span_s < 7200.0 {
        ("minutes", 60.0)
    } else {
        ("hours", 3600.0)
    }
}

/// Version, settings, rig file and run times of the campaign, for the top of the page.
fn run_header(run: Option<&super::RunFile>) -> Vec<(String, String)> {
    let Some(run) = run else {
        return vec![(
            "run".into(),
            "no run.json: records of an older version".into(),
        )];
    };
    let args = &run.invocation.args;
    let rig = args
        .iter()
        .position(|a| a == "--rig")
        .and_then(|i| args.get(i + 1).cloned())
        .or_else(|| {
            args.iter()
                .find_map(|a| a.strip_prefix("--rig=").map(String::from))
        })
        .unwrap_or_else(|| "none (built-in defaults)".into());
    vec![
        ("latchtime version".into(), run.tool_version.clone()),
        ("settings BLAKE3".into(), run.settings_blake3.clone()),
        ("rig file".into(), rig),
        (
            "run".into(),
            format!(
                "{} to {} on {}",
                run.started,
                run.finished.as_deref().unwrap_or("(not finished)"),
                run.host
            ),
        ),
        ("command".into(), format!("latchtime {}", args.join(" "))),
    ]
}

/// Every setting as (dotted name, value), for the table at the bottom of the page.
fn settings_rows(rig: &RigProfile) -> Vec<(String, String)> {
    fn flatten(prefix: &str, v: &serde_json::Value, out: &mut Vec<(String, String)>) {
        match v {
            serde_json::Value::Object(map) => {
                for (k, v) in map {
                    let name = if prefix.is_empty() {
                        k.clone()
                    } else {
                        format!("{prefix}.{k}")
                    };
                    flatten(&name, v, out);
                }
            }
            other => out.push((prefix.to_string(), other.to_string())),
        }
    }
    let mut out = Vec::new();
    if let Ok(v) = serde_json::to_value(rig) {
        flatten("", &v, &mut out);
    }
    out
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

/// Frame numbers, times and the tracked point per row of a video's measures CSV (blank track
/// cells: no point there).
fn frame_points(csv_path: &Path) -> Result<report::crops::FramePoints> {
    let bad = |reason: String| Error::malformed(csv_path, reason);
    let mut reader = csv::Reader::from_path(csv_path).map_err(|e| bad(e.to_string()))?;
    let headers = reader.headers().map_err(|e| bad(e.to_string()))?.clone();
    let col = |name: &str| headers.iter().position(|h| h == name);
    let (Some(frame), Some(time)) = (col("frame"), col("time_s")) else {
        return Err(bad("no frame or time_s column".into()));
    };
    let (x, y) = (col("track_x_px"), col("track_y_px"));
    let mut points = report::crops::FramePoints::default();
    for (i, row) in reader.records().enumerate() {
        let row = row.map_err(|e| bad(format!("row {}: {e}", i + 2)))?;
        let number = |c: Option<usize>| c.and_then(|c| row.get(c)?.trim().parse::<f64>().ok());
        let index = row.get(frame).and_then(|v| v.trim().parse::<i64>().ok());
        let (Some(index), Some(t)) = (index, number(Some(time))) else {
            return Err(bad(format!("row {}: no frame number or time", i + 2)));
        };
        points.frame.push(index);
        points.time_s.push(t);
        points.point_px.push(number(x).zip(number(y)));
    }
    Ok(points)
}

/// The crop row of a video trial's figure: its frames at the events, read from the video
/// again (only those frames are held); None for a trial without a video or in error.
fn video_crops(
    record_path: &Path,
    record: &crate::measure::TrialRecord,
    frames: Option<&crate::signal::FrameSeries>,
) -> Option<report::crops::CropStrip> {
    use report::crops::{self, CropStrip};
    if record.status == Status::Error {
        return None;
    }
    let video = PathBuf::from(record.video_file.as_ref()?);
    let strip = (|| {
        let points = frame_points(&record_path.with_extension("frames.csv"))?;
        let events = crops::events(record, &points, frames);
        let wanted: Vec<i64> = events.iter().map(|e| points.frame[e.row]).collect();
        let decoded = crate::decode::video::frames_at(&video, &wanted)?;
        Ok::<_, Error>(crops::cut(&events, &points, &decoded))
    })();
    Some(match strip {
        Ok(c) => CropStrip::Crops(c),
        Err(e) => CropStrip::Missing(format!("cannot read them again: {e}")),
    })
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
    use report::charts::{Point, StripGroup};
    use report::html::{ReviewPage, TrialRow};
    let out_dir = folder.dir();
    let plots = out_dir.join("plots");
    std::fs::create_dir_all(&plots).map_err(|e| Error::io(&plots, e))?;
    let mut figures = HashSet::new();
    let mut outcome = ReportOutcome::default();
    let mut page = ReviewPage {
        title: format!("latchtime review: {}", out_dir.display()),
        header: run_header(campaign.run.as_ref()),
        settings: settings_rows(rig),
        ..ReviewPage::default()
    };
    let manifest = manifest_times(campaign.run.as_ref());
    let mut flag_counts = vec![0usize; report::groups::FLAGS.len()];
    let mut by_group: BTreeMap<String, [Vec<Point>; 3]> = BTreeMap::new();
    let mut residuals = Vec::new();
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
        let crops = video_crops(path, &record, frames.as_ref());
        let figure = report::plots::trial_figure(
            &record,
            audio.as_ref(),
            frames.as_ref(),
            offset_s,
            crops.as_ref(),
        )
        .map_err(|e| Error::malformed(path, format!("cannot draw the figure: {e}")))?;
        let figure_name = format!("{stem}.svg");
        figures.insert(figure_name.clone());
        atomic::write_atomic(&plots.join(&figure_name), figure.as_bytes())?;
        for (i, f) in report::groups::FLAGS.iter().enumerate() {
            if record.flags.contains(f) {
                flag_counts[i] += 1;
            }
        }
        let point = |y: f64| Point {
            trial: record.trial.clone(),
            figure: figure_name.clone(),
            flagged: record.status == Status::Flagged,
            x: 0.0,
            y,
        };
        if record.status != Status::Error {
            let g = by_group
                .entry(record.group.clone().unwrap_or_else(|| "(none)".into()))
                .or_default();
            for (k, (_, _, get)) in PAGE_MEASURES.iter().enumerate() {
                if let Some(v) = get(&record).filter(|v| v.is_finite()) {
                    g[k].push(point(v));
                }
            }
        }
        if let Some(sync) = &record.sync {
            residuals.push(Residual {
                point: point(sync.residual_ms),
                tolerance_ms: sync.tolerance_ms,
                time: recording_time(&record, &manifest),
            });
        }
        page.rows.push(TrialRow::from_record(&record, figure_name));
    }
    page.flag_counts = report::groups::FLAGS
        .iter()
        .zip(flag_counts)
        .map(|(f, n)| (f.as_str().to_string(), n))
        .collect();
    for (k, (title, y_desc, _)) in PAGE_MEASURES.iter().enumerate() {
        let data: Vec<StripGroup> = by_group
            .iter()
            .map(|(g, v)| StripGroup {
                name: g.clone(),
                points: v[k].clone(),
            })
            .collect();
        let chart = report::charts::strip_chart(title, y_desc, &data)
            .map_err(|e| Error::malformed(out_dir, format!("cannot draw {title}: {e}")))?;
        page.group_charts.push(chart);
    }
    if let Some((svg, note)) = residual_chart(residuals)? {
        page.residual_chart = Some(svg);
        page.residual_note = note;
    }
    atomic::write_atomic(
        &out_dir.join("report.html"),
        report::html::render(&page).as_bytes(),
    )?;
    outcome.stale_figures = remove_stale_figures(&plots, &figures);
    Ok(outcome)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recording_times_read_as_people_write_them() {
        // 2026-03-01 is 20,513 days after 1970-01-01: 1,772,323,200 s.
        assert_eq!(parse_time("2026-03-01"), Some(1_772_323_200.0));
        assert_eq!(parse_time("2026-03-01 01:00:00"), Some(1_772_326_800.0));
        assert_eq!(parse_time("2026-03-01T01:00:00Z"), Some(1_772_326_800.0));
        assert_eq!(parse_time("last night"), None);
    }

    #[test]
    fn the_bext_time_comes_before_the_manifest_and_the_file() {
        let mut r = crate::measure::TrialRecord::empty("t", None);
        r.recording = Some(crate::measure::Recording {
            bext_time_reference_samples: 0,
            origination_date: Some("2026-03-01".into()),
            origination_time: None,
            start_s_since_midnight: 3600.0,
        });
        let manifest = HashMap::from([("t".to_string(), 0.0)]);
        let (t, source) = recording_time(&r, &manifest).unwrap();
        assert_eq!((t, source), (1_772_326_800.0, TimeSource::Bext));
        r.recording = None;
        assert_eq!(
            recording_time(&r, &manifest),
            Some((0.0, TimeSource::Manifest))
        );
        assert_eq!(recording_time(&r, &HashMap::new()), None);
    }
}
