//! `validate --like FOLDER`: what a lab's own recordings look like, measured from up to 50 of
//! its trials, and a validation shaped like them. Besides rates, click SNR and video noise it
//! measures the conditions the families stand for: ringing speed against release speed,
//! loading drift against noise, click decay, and the printing step of the time column against
//! the frame period. Each condition's share of the lab's trials weights its families.

use std::path::Path;

use serde::Serialize;

use crate::decode;
use crate::detect::{self, VideoEvents};
use crate::error::{Error, Result};
use crate::pipeline::{self, Scratch};
use crate::report::groups::quantile_sorted;
use crate::rig::RigProfile;
use crate::signal::FrameSeries;
use crate::synth::Family;

use super::ValidateConfig;

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
    /// Median over trials of the steepest slope after the motion peak over the steepest slope
    /// of the fast phase (both from 2-frame differences of a 3-frame running median).
    pub ring_per_release_speed: Option<f64>,
    /// Median loading drift (held level to the level just before the release) over the
    /// per-frame noise SD.
    pub drift_per_noise: Option<f64>,
    /// Median time from a main click's onset to its last sample at -20 dB of its peak, ms.
    pub click_decay_ms: Option<f64>,
    /// Median step of the last printed digit of the time column over the frame period (None
    /// without a time column).
    pub timestamp_step_frames: Option<f64>,
    /// Shares of the trials measured that show each condition.
    pub shares: ConditionShares,
}

/// Share of the lab's trials (of those where it could be measured) showing each condition.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct ConditionShares {
    /// Ringing steeper than the release.
    pub fast_ringing: Option<f64>,
    /// Loading drift under 6 noise SD.
    pub weak_drift: Option<f64>,
    /// Main click heard for more than 2 ms (the classic click's longest is about 1.4 ms).
    pub ringing_click: Option<f64>,
    /// Time column printed in steps of half a frame period or more.
    pub rounded_stamps: Option<f64>,
}

/// What one trial's frames show.
#[derive(Default)]
struct FrameMeasures {
    ring_per_release: Option<f64>,
    drift_per_noise: Option<f64>,
    step_frames: Option<f64>,
}

/// Reads up to 50 trials of `folder` and measures their sample rate, frame rate, click SNR,
/// video noise and the families' conditions, to shape a validation like them.
pub fn measure_like(folder: &Path, rig: &RigProfile) -> Result<MeasuredRig> {
    let trials = crate::batch::discover(folder)?;
    let (mut rates, mut fps, mut snr, mut noise) = (vec![], vec![], vec![], vec![]);
    let (mut ring, mut drift, mut decay, mut step) = (vec![], vec![], vec![], vec![]);
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
                let fm = frame_measures(&f, &v);
                ring.extend(fm.ring_per_release);
                drift.extend(fm.drift_per_noise);
                step.extend(fm.step_frames);
            }
        }
        if let (Some(path), Some(bytes)) = (&t.spec.audio, &inputs.audio) {
            if let Ok(a) = decode::decode_audio(path, bytes, rig.audio_channel) {
                rates.push(a.sample_rate_hz);
                let ev = detect::detect_audio(&a, rig, &mut scratch.click, expected);
                if let Some(m) = ev.main() {
                    snr.push(m.snr_db);
                    decay.push(m.duration_ms);
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
    let snr_range = (!snr.is_empty()).then(|| {
        snr.sort_by(f64::total_cmp);
        (
            quantile_sorted(&snr, 0.1),
            quantile_sorted(&snr, 0.9).max(quantile_sorted(&snr, 0.1) + 1.0),
        )
    });
    let shares = ConditionShares {
        fast_ringing: share(&ring, |r| r > 1.0),
        weak_drift: share(&drift, |d| d < 6.0),
        ringing_click: share(&decay, |d| d > 2.0),
        rounded_stamps: share(&step, |s| s >= 0.5),
    };
    Ok(MeasuredRig {
        trials_read: read,
        sample_rate_hz: median(&mut rates).map(|r| r.round() as u32),
        fps: median(&mut fps),
        snr_db: snr_range,
        noise_per_jump: median(&mut noise),
        ring_per_release_speed: median(&mut ring),
        drift_per_noise: median(&mut drift),
        click_decay_ms: median(&mut decay),
        timestamp_step_frames: median(&mut step),
        shares,
    })
}

fn median(v: &mut [f64]) -> Option<f64> {
    v.sort_by(f64::total_cmp);
    (!v.is_empty()).then(|| quantile_sorted(v, 0.5))
}

fn share(v: &[f64], holds: impl Fn(f64) -> bool) -> Option<f64> {
    (!v.is_empty()).then(|| v.iter().filter(|x| holds(**x)).count() as f64 / v.len() as f64)
}

/// Ringing against release speed, drift against noise and the stamps' printing step of one
/// trial's frames, where its video shows a release.
fn frame_measures(series: &FrameSeries, video: &VideoEvents) -> FrameMeasures {
    let period_s = video.clock.period_s;
    // The last printed digit's step, as written (the clock's own estimate reads a column of
    // exact multiples of the period, 0.0010000 and so on, as printed in whole periods).
    let step_frames = series
        .time_step_s
        .as_ref()
        .and_then(|steps| median(&mut steps.clone()))
        .map(|s| s / period_s);
    let Some(m) = &video.motion else {
        return FrameMeasures {
            step_frames,
            ..FrameMeasures::default()
        };
    };
    let rates = smoothed_rates(&series.motion, period_s);
    let (start, peak) = (m.pre_release_index, m.motion_peak_index);
    let ring_end = (peak + 4 * (peak - start.min(peak)) + 10).min(rates.len());
    let steepest = |a: usize, b: usize| {
        rates
            .get(a..b.max(a))
            .map_or(0.0, |r| r.iter().fold(0.0f64, |x, v| x.max(v.abs())))
    };
    let release_rate = steepest(start, peak);
    let ring_rate = steepest(peak + 1, ring_end);
    let ring_per_release = (release_rate > 0.0).then(|| ring_rate / release_rate);
    FrameMeasures {
        ring_per_release,
        drift_per_noise: drift_per_noise(&series.loading, video, start),
        step_frames,
    }
}

/// Slopes per second from 2-frame differences of a 3-frame running median (one per frame
/// pair, index k spans frames k..k+2).
fn smoothed_rates(y: &[f64], period_s: f64) -> Vec<f64> {
    let smooth: Vec<f64> = (0..y.len())
        .map(|k| {
            let mut w = [y[k.saturating_sub(1)], y[k], y[(k + 1).min(y.len() - 1)]];
            w.sort_by(f64::total_cmp);
            w[1]
        })
        .collect();
    smooth
        .windows(3)
        .map(|w| (w[2] - w[0]) / (2.0 * period_s))
        .collect()
}

/// Loading drift from the held level (before the detected onset, else the first tenth of the
/// frames before the release) to the 5 frames before the release, over the noise SD.
fn drift_per_noise(y: &[f64], video: &VideoEvents, release_index: usize) -> Option<f64> {
    if video.noise_sigma <= 0.0 || release_index < 10 || release_index > y.len() {
        return None;
    }
    let t = &video.clock.time_s;
    let onset_index = video
        .loading
        .as_ref()
        .map_or(0, |l| t.partition_point(|v| *v < l.onset_s));
    let held_end = if onset_index >= 5 {
        onset_index
    } else {
        (release_index / 10).max(3)
    };
    let mut held = y[..held_end].to_vec();
    let mut loaded = y[release_index - 5..release_index].to_vec();
    let (a, b) = (median(&mut held)?, median(&mut loaded)?);
    Some((b - a).abs() / video.noise_sigma)
}

impl ValidateConfig {
    /// Applies what was measured from a lab's recordings: rates, SNR, noise, and family
    /// weights raised by the share of the lab's trials that show each family's condition
    /// (weight 1 + 4 x share, so that a condition every trial shows is drawn five times as
    /// often as one none shows; no family is left out).
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
        let s = &m.shares;
        for (family, weight) in self.families.iter_mut() {
            let condition = match family {
                Family::FastRinging | Family::HardStopBounce => s.fast_ringing,
                Family::SmallJump | Family::RampedDrive | Family::MidLoading => s.weak_drift,
                Family::RingingClicks => s.ringing_click,
                Family::RoundedLong => s.rounded_stamps,
                _ => None,
            };
            *weight *= 1.0 + 4.0 * condition.unwrap_or(0.0);
        }
        self
    }
}
