//! Validation on synthetic trials shaped like a lab's own rig: how precise the detectors are at
//! this sample rate, frame rate and noise level, before a campaign is trusted. Trials of every
//! kind are synthesised with known truth from weighted families (`synth::Family`: release
//! shapes, fast ringing, small jumps, ramped drives, records that start mid-loading, rounded
//! exports, heavy damping, creep, ringing clicks, latch-set ticks, the original trial, and a
//! held-out family no setting is tuned on), with dropped frames and out-of-sync clicks, written
//! to bytes exactly as files would be, analysed by the same pipeline as a batch, and compared
//! event by event and flag by flag, over all trials and per family. Pure computation: nothing
//! is printed or written here.

use std::path::PathBuf;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::measure::{Flag, TrialRecord};
use crate::pipeline::{self, Scratch, TrialInputs, TrialSpec};
use crate::report::groups::quantile_sorted;
use crate::rig::RigProfile;
use crate::synth::{self, Family, SampleEncoding, SynthConfig, TrialKind};

mod like;
pub mod video;

pub use like::{measure_like, ConditionShares, MeasuredRig};

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
    /// Families drawn from, with their weights (a trial's family is drawn from its own random
    /// stream, so the kinds and trial seeds do not depend on the families).
    pub families: Vec<(Family, f64)>,
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
            // Every family, equally often.
            families: Family::ALL.into_iter().map(|f| (f, 1.0)).collect(),
        }
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
    /// The same per family (all SNR bands pooled), the held-out family last.
    pub families: Vec<FamilyAccuracy>,
    /// The trials where a scored flag or the click went wrong, to look at one by one
    /// (`latchtime synth --seed` does not reproduce them; the seed here is per trial).
    pub disagreements: Vec<Disagreement>,
    /// Rendered video trials (`validate --video`), scored apart.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub video: Option<video::VideoValidation>,
}

/// The accuracy of one family's trials.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FamilyAccuracy {
    pub family: Family,
    /// Kept out of every tuning loop.
    pub held_out: bool,
    pub trials: usize,
    pub errors: usize,
    pub events: Vec<EventAccuracy>,
    pub flags: Vec<FlagAccuracy>,
}

/// One synthetic trial whose flags or click disagree with its truth.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Disagreement {
    pub trial: String,
    pub kind: TrialKind,
    pub family: Family,
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
/// The row that scores `loading_before_record` like a flag, on trials with frames that load.
pub const BEFORE_RECORD_ROW: &str = "loading_before_record";

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

/// The events scored, with their units, in table order.
const EVENTS: [(&str, &str); 11] = [
    ("click_onset_s", "us"),
    ("latch_release_s (audio-refined)", "ms"),
    ("latch_release_video_s", "frames"),
    ("motion_peak_s", "frames"),
    ("loading_onset_s", "% of loading"),
    ("loading_ms", "%"),
    ("release_ms", "%"),
    ("amplification", "%"),
    ("amplitude_ratio", "absolute"),
    // The loading targets hold where the drift is at least 6 noise SD.
    ("loading_onset_s, drift >= 6 sd", "% of loading"),
    ("loading_ms, drift >= 6 sd", "%"),
];

/// Drift over noise SD from which the loading targets apply.
const CLEAR_DRIFT_SIGMA: f64 = 6.0;

#[derive(Clone, Copy)]
struct Sample {
    snr_db: f64,
    value: Option<f64>,
    covered: Option<bool>,
}

/// Counts of one flag decision: true and false positives, false and true negatives.
type Counts = (usize, usize, usize, usize);

/// One trial scored against its truth.
struct TrialScore {
    /// (index into `EVENTS`, sample).
    samples: Vec<(usize, Sample)>,
    /// Per scored flag: (the truth has it, the record has it).
    flags: Vec<(bool, bool)>,
    /// double_click without second clicks under `AUDIBLE_DB`, when the trial counts there.
    audible_double: Option<(bool, bool)>,
    /// (the record starts mid-loading, the record says so), for trials with frames that load.
    before_record: Option<(bool, bool)>,
    click_missed: bool,
    error: bool,
}

/// Scores pooled over trials.
struct Tally {
    trials: usize,
    errors: usize,
    events: Vec<Vec<Sample>>,
    flags: Vec<Counts>,
    audible_double: Counts,
    before_record: Counts,
}

impl Tally {
    fn new() -> Self {
        Tally {
            trials: 0,
            errors: 0,
            events: vec![Vec::new(); EVENTS.len()],
            flags: vec![(0, 0, 0, 0); SCORED_FLAGS.len()],
            audible_double: (0, 0, 0, 0),
            before_record: (0, 0, 0, 0),
        }
    }

    fn add(&mut self, score: &TrialScore) {
        self.trials += 1;
        self.errors += usize::from(score.error);
        for (slot, sample) in &score.samples {
            self.events[*slot].push(*sample);
        }
        for (counts, (want, got)) in self.flags.iter_mut().zip(&score.flags) {
            tally(counts, *want, *got);
        }
        if let Some((want, got)) = score.audible_double {
            tally(&mut self.audible_double, want, got);
        }
        if let Some((want, got)) = score.before_record {
            tally(&mut self.before_record, want, got);
        }
    }

    /// Event rows per SNR band (bands without trials left out, except "all").
    fn event_rows(&self, bands: &[(&str, f64, f64)]) -> Vec<EventAccuracy> {
        let mut rows = Vec::new();
        for ((event, unit), samples) in EVENTS.iter().zip(&self.events) {
            for (band, lo, hi) in bands {
                let in_band: Vec<&Sample> = samples
                    .iter()
                    .filter(|s| s.snr_db >= *lo && s.snr_db < *hi)
                    .collect();
                if in_band.is_empty() && *band != "all" {
                    continue;
                }
                rows.push(accuracy(event, band, unit, &in_band));
            }
        }
        rows
    }

    fn flag_rows(&self) -> Vec<FlagAccuracy> {
        let mut named: Vec<(String, Counts)> = SCORED_FLAGS
            .iter()
            .map(|f| f.as_str().to_string())
            .zip(self.flags.iter().copied())
            .collect();
        named.insert(1, (DOUBLE_AUDIBLE_ROW.to_string(), self.audible_double));
        named.push((BEFORE_RECORD_ROW.to_string(), self.before_record));
        named
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
            .collect()
    }
}

/// Misses, median and 95th percentile of the absolute errors, and interval coverage.
fn accuracy(event: &str, band: &str, unit: &str, samples: &[&Sample]) -> EventAccuracy {
    let mut errs: Vec<f64> = samples.iter().filter_map(|s| s.value).collect();
    errs.sort_by(f64::total_cmp);
    let covered: Vec<bool> = samples.iter().filter_map(|s| s.covered).collect();
    EventAccuracy {
        event: event.to_string(),
        band: band.to_string(),
        unit: unit.to_string(),
        n: samples.len(),
        misses: samples.len() - errs.len(),
        median_abs_error: (!errs.is_empty()).then(|| quantile_sorted(&errs, 0.5)),
        p95_abs_error: (!errs.is_empty()).then(|| quantile_sorted(&errs, 0.95)),
        coverage_95: (!covered.is_empty())
            .then(|| covered.iter().filter(|c| **c).count() as f64 / covered.len() as f64),
    }
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

/// Draws a family by weight.
fn pick_family(rng: &mut ChaCha8Rng, families: &[(Family, f64)]) -> Family {
    let total: f64 = families.iter().map(|(_, w)| w.max(0.0)).sum();
    let mut at = if total > 0.0 {
        rng.gen_range(0.0..total)
    } else {
        0.0
    };
    for (family, weight) in families {
        if at < weight.max(0.0) {
            return *family;
        }
        at -= weight.max(0.0);
    }
    families.last().map_or(Family::Classic, |(f, _)| *f)
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
    // A stream of its own, so that one family alone gives the trials it always gave.
    let mut family_rng = ChaCha8Rng::seed_from_u64(config.seed ^ 0x5eed_fa31_1e55_0001);
    let mut scratch = Scratch::default();
    let mut overall = Tally::new();
    let mut by_family: Vec<(Family, Tally)> = Vec::new();
    let mut disagreements = Vec::new();
    for i in 0..config.count {
        let kind = pick_kind(&mut rng);
        let family = pick_family(&mut family_rng, &config.families);
        let synth_config = synth_config_for(config, family, &mut rng);
        let name = format!("validate-{i:05}");
        let trial = synth::generate(&name, kind, &synth_config, rig, rng.gen());
        let record = analyze_trial(&trial, &name, config, rig, &mut scratch);
        let score = score_trial(&record, &trial, 1.0 / config.fps);
        overall.add(&score);
        family_tally(&mut by_family, family).add(&score);
        if let Some(d) = disagreement(&score, &trial, &record, family) {
            disagreements.push(d);
            if keep {
                kept.push(trial);
            }
        }
    }
    by_family.sort_by_key(|(f, _)| (f.is_held_out(), *f));
    let families = by_family
        .into_iter()
        .map(|(family, t)| FamilyAccuracy {
            family,
            held_out: family.is_held_out(),
            trials: t.trials,
            errors: t.errors,
            events: t.event_rows(&BANDS[..1]),
            flags: t.flag_rows(),
        })
        .collect();
    let report = ValidationReport {
        config: config.clone(),
        trials: config.count,
        errors: overall.errors,
        events: overall.event_rows(&BANDS),
        flags: overall.flag_rows(),
        families,
        disagreements,
        video: None,
    };
    (report, kept)
}

fn family_tally(by_family: &mut Vec<(Family, Tally)>, family: Family) -> &mut Tally {
    let at = match by_family.iter().position(|(f, _)| *f == family) {
        Some(at) => at,
        None => {
            by_family.push((family, Tally::new()));
            by_family.len() - 1
        }
    };
    &mut by_family[at].1
}

/// The recording settings of one validation trial (dropped frames drawn from `rng`).
fn synth_config_for(config: &ValidateConfig, family: Family, rng: &mut ChaCha8Rng) -> SynthConfig {
    SynthConfig {
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
        family,
        ..SynthConfig::default()
    }
}

/// Runs the batch pipeline on the trial's bytes, as written to files.
fn analyze_trial(
    trial: &synth::SynthTrial,
    name: &str,
    config: &ValidateConfig,
    rig: &RigProfile,
    scratch: &mut Scratch,
) -> TrialRecord {
    let inputs = TrialInputs {
        audio: synth::wav_bytes(trial).map(crate::decode::InputBytes::from),
        frames: synth::frames_csv(trial, config.timestamp_digits).map(String::into_bytes),
        video_blake3: None,
    };
    let spec = TrialSpec {
        name: name.to_string(),
        group: None,
        audio: Some(PathBuf::from(format!("{name}.wav"))),
        frames: Some(PathBuf::from(format!("{name}.frames.csv"))),
        video: None,
    };
    pipeline::analyze(&spec, &inputs, rig, scratch)
}

/// The trial, when a scored flag or its click went wrong.
fn disagreement(
    score: &TrialScore,
    trial: &synth::SynthTrial,
    record: &TrialRecord,
    family: Family,
) -> Option<Disagreement> {
    let pick = |want: bool| -> Vec<Flag> {
        SCORED_FLAGS
            .iter()
            .zip(&score.flags)
            .filter(|(_, (w, g))| w != g && *w == want)
            .map(|(f, _)| *f)
            .collect()
    };
    let (missed_flags, extra_flags) = (pick(true), pick(false));
    if !score.click_missed && missed_flags.is_empty() && extra_flags.is_empty() {
        return None;
    }
    Some(Disagreement {
        trial: trial.name.clone(),
        kind: trial.truth.kind,
        family,
        click_snr_db: trial.truth.click_snr_db,
        missed_flags,
        extra_flags,
        true_clicks_s: trial.truth.clicks_s.clone().unwrap_or_default(),
        found_clicks_s: record.clicks_s.clone().unwrap_or_default(),
    })
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

/// Scores one trial's flags and events against its truth.
fn score_trial(record: &TrialRecord, trial: &synth::SynthTrial, period_s: f64) -> TrialScore {
    let truth = &trial.truth;
    let flags: Vec<(bool, bool)> = SCORED_FLAGS
        .iter()
        .map(|f| (truth.flags.contains(f), record.flags.contains(f)))
        .collect();
    // double_click again, leaving out second clicks below the SNR floor the targets assume
    // (10 dB); false positives count as before.
    let want = truth.flags.contains(&Flag::DoubleClick);
    let audible = !want || truth.second_click_snr_db.is_some_and(|s| s >= AUDIBLE_DB);
    let audible_double = audible.then(|| (want, record.flags.contains(&Flag::DoubleClick)));
    let mut samples = Vec::new();
    let click_missed = score_events(record, truth, period_s, &mut samples);
    // The loading rows again, for trials whose drift is at least 6 noise SD.
    if trial.drift_sigma.is_some_and(|d| d >= CLEAR_DRIFT_SIGMA) {
        let clear: Vec<(usize, Sample)> = samples
            .iter()
            .filter(|(slot, _)| *slot == 4 || *slot == 5)
            .map(|(slot, s)| (slot + 5, *s))
            .collect();
        samples.extend(clear);
    }
    let before_record = truth.loading_before_record.map(|want| {
        let got = record.loading_before_record == Some(true);
        (want, got)
    });
    TrialScore {
        samples,
        flags,
        audible_double,
        before_record,
        click_missed,
        error: record.error.is_some(),
    }
}

/// Scores one trial's events into `samples` (index into `EVENTS`, sample); true when its
/// click was missed.
fn score_events(
    record: &TrialRecord,
    truth: &synth::Truth,
    period_s: f64,
    samples: &mut Vec<(usize, Sample)>,
) -> bool {
    let snr = truth.click_snr_db.unwrap_or(f64::INFINITY);
    let mut push = |slot: usize, value: Option<f64>, covered: Option<bool>| {
        samples.push((
            slot,
            Sample {
                snr_db: snr,
                value,
                covered,
            },
        ));
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
    // A record that starts mid-loading shows no onset; the before-record row scores it.
    let shows_onset = truth.loading_before_record != Some(true);
    if let (Some(t), Some(load_ms), true) = (truth.loading_onset_s, truth.loading_ms, shows_onset) {
        let err_ms = record.loading_onset_s.map(|r| (r - t).abs() * 1e3);
        let covered = match (record.loading_onset_early_s, record.loading_onset_late_s) {
            (Some(a), Some(b)) => Some(a <= t && t <= b),
            _ => None,
        };
        push(4, err_ms.map(|e| 100.0 * e / load_ms), covered);
    }
    let relative =
        |r: Option<f64>, t: f64| r.filter(|_| t != 0.0).map(|r| 100.0 * ((r - t) / t).abs());
    if let (Some(t), true) = (truth.loading_ms, shows_onset) {
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
    if let (Some(t), true) = (truth.amplification, shows_onset) {
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
