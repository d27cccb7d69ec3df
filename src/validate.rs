//! Validation on synthetic trials shaped like a lab's own rig: how precise the detectors are at
//! this sample rate, frame rate and noise level, before a campaign is trusted. Trials of every
//! kind are synthesised with known truth (with latch creep, overdamped releases, gently starting
//! loading drifts, dropped frames and out-of-sync clicks), written to bytes exactly as files
//! would be, analysed by the same pipeline as a batch, and compared event by event and flag by
//! flag. Pure computation: nothing is printed or written here.

use std::path::{Path, PathBuf};

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::decode;
use crate::detect;
use crate::error::{Error, Result};
use crate::measure::{Flag, TrialRecord};
use crate::pipeline::{self, Scratch, TrialInputs, TrialSpec};
use crate::report::groups::quantile_sorted;
use crate::rig::RigProfile;
use crate::synth::{self, SampleEncoding, SynthConfig, TrialKind};

/// What to synthesise.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ValidateConfig {
    pub count: usize,
    pub seed: u64,
    /// Click SNR range, dB (peak over noise RMS).
    pub snr_db: (f64, f64),
    pub sample_rate_hz: u32,
    pub fps: f64,
    pub duration_s: f64,
    /// Per-frame noise of the motion measure, in units where the fast phase moves 40-70.
    pub video_noise: f64,
    /// Round timestamps to this many significant digits, as some exporters do.
    pub timestamp_digits: Option<u32>,
}

impl Default for ValidateConfig {
    fn default() -> Self {
        ValidateConfig {
            count: 300,
            seed: 1,
            snr_db: (10.0, 40.0),
            sample_rate_hz: 96_000,
            fps: 1000.0,
            duration_s: 0.4,
            video_noise: 0.5,
            timestamp_digits: None,
        }
    }
}

/// Recording properties measured from a lab's own trials (`--like`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MeasuredRig {
    pub trials_read: usize,
    pub sample_rate_hz: Option<u32>,
    pub fps: Option<f64>,
    /// 10th and 90th percentile of the main clicks' SNR, dB.
    pub snr_db: Option<(f64, f64)>,
    /// Per-frame noise relative to the fast-phase jump.
    pub noise_per_jump: Option<f64>,
}

/// Reads up to 50 trials of `folder` and measures their sample rate, frame rate, click SNR
/// and video noise, to shape a validation like them.
pub fn measure_like(folder: &Path, rig: &RigProfile) -> Result<MeasuredRig> {
    let trials = crate::batch::discover(folder)?;
    let mut rates = Vec::new();
    let mut fps = Vec::new();
    let mut snr = Vec::new();
    let mut noise = Vec::new();
    let mut read = 0;
    let mut scratch = Scratch::default();
    for t in trials.iter().take(50) {
        let Ok(inputs) = pipeline::read_inputs(&t.spec) else {
            continue;
        };
        read += 1;
        let mut expected = None;
        if let (Some(path), Some(bytes)) = (&t.spec.frames, &inputs.frames) {
            if let Ok(f) = decode::decode_frames(path, bytes, &rig.into()) {
                let v = detect::detect_video(&f, rig);
                expected = detect::expected_click(&v, rig);
                fps.push(1.0 / v.clock.period_s);
                if let Some(m) = &v.motion {
                    if m.jump != 0.0 {
                        noise.push(v.noise_sigma / m.jump.abs());
                    }
                }
            }
        }
        if let (Some(path), Some(bytes)) = (&t.spec.audio, &inputs.audio) {
            if let Ok(a) = decode::decode_audio(path, bytes, rig.audio_channel) {
                rates.push(a.sample_rate_hz);
                let ev = detect::detect_audio(&a, rig, &mut scratch.click, expected);
                if let Some(m) = ev.main() {
                    snr.push(m.snr_db);
                }
            }
        }
    }
    if read == 0 {
        return Err(Error::Usage(format!(
            "{}: no readable trials to measure",
            folder.display()
        )));
    }
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        (!v.is_empty()).then(|| quantile_sorted(v, 0.5))
    };
    let snr_range = (!snr.is_empty()).then(|| {
        snr.sort_by(f64::total_cmp);
        (
            quantile_sorted(&snr, 0.1),
            quantile_sorted(&snr, 0.9).max(quantile_sorted(&snr, 0.1) + 1.0),
        )
    });
    Ok(MeasuredRig {
        trials_read: read,
        sample_rate_hz: median(&mut rates).map(|r| r.round() as u32),
        fps: median(&mut fps),
        snr_db: snr_range,
        noise_per_jump: median(&mut noise),
    })
}

impl ValidateConfig {
    /// Applies what was measured from a lab's recordings.
    pub fn shaped_like(mut self, m: &MeasuredRig) -> Self {
        if let Some(r) = m.sample_rate_hz {
            self.sample_rate_hz = r;
        }
        if let Some(f) = m.fps {
            self.fps = f;
        }
        if let Some(s) = m.snr_db {
            self.snr_db = s;
        }
        if let Some(n) = m.noise_per_jump {
            // The synthetic jump is 40-70 units, 55 on average.
            self.video_noise = n * 55.0;
        }
        self
    }
}

/// Accuracy of one event in one SNR band.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EventAccuracy {
    pub event: String,
    pub band: String,
    pub unit: String,
    /// Trials where the truth has the event.
    pub n: usize,
    /// Of those, trials where it was not found (or found more than 1 ms / 2 frames away).
    pub misses: usize,
    pub median_abs_error: Option<f64>,
    pub p95_abs_error: Option<f64>,
    /// Share of trials whose reported 95 % interval (`loading_onset_early_s` to
    /// `loading_onset_late_s`) covers the truth (loading onset only).
    pub coverage_95: Option<f64>,
}

/// Detection quality of one flag.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FlagAccuracy {
    pub flag: String,
    pub true_positives: usize,
    pub false_positives: usize,
    pub false_negatives: usize,
    pub precision: Option<f64>,
    pub recall: Option<f64>,
    /// False positives over trials that could raise the flag but should not.
    pub false_alarm_rate: Option<f64>,
}

/// The outcome of a validation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ValidationReport {
    pub config: ValidateConfig,
    pub trials: usize,
    pub errors: usize,
    pub events: Vec<EventAccuracy>,
    pub flags: Vec<FlagAccuracy>,
    /// The trials where a scored flag or the click went wrong, to look at one by one
    /// (`latchtime synth --seed` does not reproduce them; the seed here is per trial).
    pub disagreements: Vec<Disagreement>,
}

/// One synthetic trial whose flags or click disagree with its truth.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Disagreement {
    pub trial: String,
    pub kind: TrialKind,
    /// SNR of the (first) click as synthesised, dB.
    pub click_snr_db: Option<f64>,
    /// Scored flags the truth has and the record lacks.
    pub missed_flags: Vec<Flag>,
    /// Scored flags the record has and the truth lacks.
    pub extra_flags: Vec<Flag>,
    /// True click onsets, audio clock, seconds.
    pub true_clicks_s: Vec<f64>,
    /// Detected click onsets, audio clock, seconds.
    pub found_clicks_s: Vec<f64>,
}

const BANDS: [(&str, f64, f64); 5] = [
    ("all", f64::NEG_INFINITY, f64::INFINITY),
    ("10-13 dB", 10.0, 13.0),
    ("13-20 dB", 13.0, 20.0),
    ("20-30 dB", 20.0, 30.0),
    (">= 30 dB", 30.0, f64::INFINITY),
];

/// SNR floor of the targets, dB: second clicks below it are scored apart.
const AUDIBLE_DB: f64 = 10.0;
/// Name of the double_click row that leaves out second clicks below `AUDIBLE_DB`.
pub const DOUBLE_AUDIBLE_ROW: &str = "double_click, second >= 10 dB";

/// Flags whose detection is scored.
const SCORED_FLAGS: [Flag; 7] = [
    Flag::DoubleClick,
    Flag::NoClick,
    Flag::Clipped,
    Flag::SyncMismatch,
    Flag::FrameGaps,
    Flag::NoRelease,
    Flag::NoLoading,
];

struct Sample {
    snr_db: f64,
    value: Option<f64>,
    covered: Option<bool>,
}

fn pick_kind(rng: &mut ChaCha8Rng) -> TrialKind {
    match rng.gen_range(0..100) {
        0..=44 => TrialKind::Normal,
        45..=56 => TrialKind::DoubleClick,
        57..=64 => TrialKind::Failed,
        65..=69 => TrialKind::Empty,
        70..=79 => TrialKind::Clipped,
        _ => TrialKind::OutOfSync,
    }
}

/// Synthesises `config.count` trials like the rig, analyses them and scores the results.
pub fn validate(rig: &RigProfile, config: &ValidateConfig) -> ValidationReport {
    validate_keeping(rig, config, false).0
}

/// As [`validate`], also returning the synthetic trials that disagree with their truth when
/// `keep` is set (to write out and look at, e.g. with `latchtime trial`).
pub fn validate_keeping(
    rig: &RigProfile,
    config: &ValidateConfig,
    keep: bool,
) -> (ValidationReport, Vec<synth::SynthTrial>) {
    let mut kept = Vec::new();
    let mut rng = ChaCha8Rng::seed_from_u64(config.seed);
    let mut scratch = Scratch::default();
    let mut events: Vec<(&'static str, &'static str, Vec<Sample>)> = vec![
        ("click_onset_s", "us", Vec::new()),
        ("latch_release_s (audio-refined)", "ms", Vec::new()),
        ("latch_release_video_s", "frames", Vec::new()),
        ("motion_peak_s", "frames", Vec::new()),
        ("loading_onset_s", "% of loading", Vec::new()),
        ("loading_ms", "%", Vec::new()),
        ("release_ms", "%", Vec::new()),
        ("amplification", "%", Vec::new()),
        ("amplitude_ratio", "absolute", Vec::new()),
    ];
    let mut flag_counts = vec![(0usize, 0usize, 0usize, 0usize); SCORED_FLAGS.len()];
    let mut errors = 0;
    let mut disagreements = Vec::new();
    let mut audible_double = (0usize, 0usize, 0usize, 0usize);
    let period = 1.0 / config.fps;
    for i in 0..config.count {
        let kind = pick_kind(&mut rng);
        let synth_config = SynthConfig {
            sample_rate_hz: config.sample_rate_hz,
            fps: config.fps,
            duration_s: config.duration_s,
            encoding: if config.sample_rate_hz > 100_000 {
                SampleEncoding::Int24
            } else {
                SampleEncoding::Int16
            },
            click_snr_db: Some(config.snr_db),
            video_noise: config.video_noise,
            variety: true,
            dropped_frames: if rng.gen_bool(0.1) {
                rng.gen_range(1..=3)
            } else {
                0
            },
            timestamp_digits: config.timestamp_digits,
            ..SynthConfig::default()
        };
        let name = format!("validate-{i:05}");
        let trial = synth::generate(&name, kind, &synth_config, rig, rng.gen());
        let inputs = TrialInputs {
            audio: synth::wav_bytes(&trial),
            frames: synth::frames_csv(&trial, config.timestamp_digits).map(String::into_bytes),
        };
        let spec = TrialSpec {
            name: name.clone(),
            group: None,
            audio: Some(PathBuf::from(format!("{name}.wav"))),
            frames: Some(PathBuf::from(format!("{name}.frames.csv"))),
        };
        let record = pipeline::analyze(&spec, &inputs, rig, &mut scratch);
        if record.error.is_some() {
            errors += 1;
        }
        let click_missed = score_trial(&record, &trial.truth, period, &mut events);
        let (mut missed_flags, mut extra_flags) = (Vec::new(), Vec::new());
        for (k, flag) in SCORED_FLAGS.iter().enumerate() {
            let want = trial.truth.flags.contains(flag);
            let got = record.flags.contains(flag);
            tally(&mut flag_counts[k], want, got);
            if want && !got {
                missed_flags.push(*flag);
            } else if got && !want {
                extra_flags.push(*flag);
            }
        }
        // double_click again, leaving out second clicks below the SNR floor the targets
        // assume (10 dB); false positives count as before.
        let want = trial.truth.flags.contains(&Flag::DoubleClick);
        if !want
            || trial
                .truth
                .second_click_snr_db
                .is_some_and(|s| s >= AUDIBLE_DB)
        {
            tally(
                &mut audible_double,
                want,
                record.flags.contains(&Flag::DoubleClick),
            );
        }
        if click_missed || !missed_flags.is_empty() || !extra_flags.is_empty() {
            disagreements.push(Disagreement {
                trial: name,
                kind,
                click_snr_db: trial.truth.click_snr_db,
                missed_flags,
                extra_flags,
                true_clicks_s: trial.truth.clicks_s.clone().unwrap_or_default(),
                found_clicks_s: record.clicks_s.clone().unwrap_or_default(),
            });
            if keep {
                kept.push(trial);
            }
        }
    }
    let mut rows = Vec::new();
    for (event, unit, samples) in &events {
        for (band, lo, hi) in BANDS {
            let in_band: Vec<&Sample> = samples
                .iter()
                .filter(|s| s.snr_db >= lo && s.snr_db < hi)
                .collect();
            if in_band.is_empty() && band != "all" {
                continue;
            }
            let mut errs: Vec<f64> = in_band.iter().filter_map(|s| s.value).collect();
            errs.sort_by(f64::total_cmp);
            let covered: Vec<bool> = in_band.iter().filter_map(|s| s.covered).collect();
            rows.push(EventAccuracy {
                event: event.to_string(),
                band: band.to_string(),
                unit: unit.to_string(),
                n: in_band.len(),
                misses: in_band.len() - errs.len(),
                median_abs_error: (!errs.is_empty()).then(|| quantile_sorted(&errs, 0.5)),
                p95_abs_error: (!errs.is_empty()).then(|| quantile_sorted(&errs, 0.95)),
                coverage_95: (!covered.is_empty())
                    .then(|| covered.iter().filter(|c| **c).count() as f64 / covered.len() as f64),
            });
        }
    }
    let mut named: Vec<(String, (usize, usize, usize, usize))> = SCORED_FLAGS
        .iter()
        .map(|f| f.as_str().to_string())
        .zip(flag_counts)
        .collect();
    named.insert(1, (DOUBLE_AUDIBLE_ROW.to_string(), audible_double));
    let flags = named
        .into_iter()
        .map(|(flag, (tp, fp, fn_, tn))| FlagAccuracy {
            flag,
            true_positives: tp,
            false_positives: fp,
            false_negatives: fn_,
            precision: (tp + fp > 0).then(|| tp as f64 / (tp + fp) as f64),
            recall: (tp + fn_ > 0).then(|| tp as f64 / (tp + fn_) as f64),
            false_alarm_rate: (fp + tn > 0).then(|| fp as f64 / (fp + tn) as f64),
        })
        .collect();
    let report = ValidationReport {
        config: config.clone(),
        trials: config.count,
        errors,
        events: rows,
        flags,
        disagreements,
    };
    (report, kept)
}

/// Counts one flag decision into (true positives, false positives, false negatives, true
/// negatives).
fn tally(c: &mut (usize, usize, usize, usize), want: bool, got: bool) {
    match (want, got) {
        (true, true) => c.0 += 1,
        (false, true) => c.1 += 1,
        (true, false) => c.2 += 1,
        (false, false) => c.3 += 1,
    }
}

/// Scores one trial into `events`; true when its click was missed.
fn score_trial(
    record: &TrialRecord,
    truth: &synth::Truth,
    period_s: f64,
    events: &mut [(&'static str, &'static str, Vec<Sample>)],
) -> bool {
    let snr = truth.click_snr_db.unwrap_or(f64::INFINITY);
    let mut push = |slot: usize, value: Option<f64>, covered: Option<bool>| {
        events[slot].2.push(Sample {
            snr_db: snr,
            value,
            covered,
        });
    };
    let abs_within = |r: Option<f64>, t: f64, scale: f64, limit: f64| {
        r.map(|r| (r - t).abs() * scale).filter(|e| *e <= limit)
    };
    // Whether the truth lies within 1.96 standard uncertainties of the value.
    let within = |r: Option<f64>, sd: Option<f64>, t: f64| match (r, sd) {
        (Some(r), Some(sd)) => Some((r - t).abs() <= 1.96 * sd),
        _ => None,
    };
    let ms = |sd: Option<f64>| sd.map(|v| v * 1e-3);
    let mut click_missed = false;
    if let Some(t) = truth.click_onset_s {
        // A pick more than 1 ms away found something else: a miss.
        let error_us = abs_within(record.click_onset_s, t, 1e6, 1000.0);
        click_missed = error_us.is_none();
        push(0, error_us, None);
    }
    let refined = record.sync.is_some() && !record.flags.contains(&Flag::SyncMismatch);
    if let Some(t) = truth.latch_release_s {
        if refined && truth.kind != TrialKind::OutOfSync {
            push(
                1,
                abs_within(record.latch_release_s, t, 1e3, 1.0),
                within(record.latch_release_s, ms(record.latch_release_sd_ms), t),
            );
        }
        push(
            2,
            abs_within(record.latch_release_video_s, t, 1.0 / period_s, 10.0),
            within(
                record.latch_release_video_s,
                ms(record.latch_release_video_sd_ms),
                t,
            ),
        );
    }
    if let Some(t) = truth.motion_peak_s {
        push(
            3,
            abs_within(record.motion_peak_s, t, 1.0 / period_s, 10.0),
            within(record.motion_peak_s, ms(record.motion_peak_sd_ms), t),
        );
    }
    if let (Some(t), Some(load_ms)) = (truth.loading_onset_s, truth.loading_ms) {
        let err_ms = record.loading_onset_s.map(|r| (r - t).abs() * 1e3);
        let covered = match (record.loading_onset_early_s, record.loading_onset_late_s) {
            (Some(a), Some(b)) => Some(a <= t && t <= b),
            _ => None,
        };
        push(4, err_ms.map(|e| 100.0 * e / load_ms), covered);
    }
    let relative =
        |r: Option<f64>, t: f64| r.filter(|_| t != 0.0).map(|r| 100.0 * ((r - t) / t).abs());
    if let Some(t) = truth.loading_ms {
        push(
            5,
            relative(record.loading_ms, t),
            within(record.loading_ms, record.loading_ms_sd, t),
        );
    }
    if let Some(t) = truth.release_ms {
        push(
            6,
            relative(record.release_ms, t),
            within(record.release_ms, record.release_ms_sd, t),
        );
    }
    if let Some(t) = truth.amplification {
        push(
            7,
            relative(record.amplification, t),
            within(record.amplification, record.amplification_sd, t),
        );
    }
    if let Some(o) = &truth.oscillation {
        let r = record.oscillation.as_ref();
        let got = r.map(|r| (r.amplitude_ratio - o.amplitude_ratio).abs());
        let covered = within(
            r.map(|r| r.amplitude_ratio),
            r.and_then(|r| r.amplitude_ratio_sd),
            o.amplitude_ratio,
        );
        push(8, got, covered);
    }
    click_missed
}
