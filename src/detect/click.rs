//! Click transients on the audio clock.
//!
//! 1. Zero-phase 4th-order Butterworth high-pass ([`super::filter`]) removes DC, mains hum and
//!    handling thumps without moving anything in time.
//! 2. Candidates: samples above `click_threshold_sigma` robust noise standard deviations (median
//!    absolute deviation of the filtered signal), crossings closer than `click_merge_ms` grouped
//!    into one transient.
//! 3. Onset: the AIC picker of Maeda (1985), AIC(k) = k ln var(x[..k]) + (N-k-1) ln var(x[k..]),
//!    minimised on a short window ending just after the first crossing. It needs no threshold
//!    of its own and is exact to the sample on a clean step in variance. It runs on the same
//!    high-pass applied causally (forward only) from 10 ms before the window: a zero-phase
//!    filter smears a loud click's onset backwards by a fraction of a millisecond (pre-ringing),
//!    a causal one cannot move a broadband onset earlier.
//! 4. Click or thump: the spectral centroid of the raw transient (detrended, Hann window) must
//!    reach `min_click_centroid_hz`; handling thumps are low-frequency.

use std::sync::Arc;

use rustfft::num_complex::Complex;
use rustfft::{Fft, FftPlanner};
use serde::{Deserialize, Serialize};

use super::filter::{butterworth_highpass, filter_causal, filtfilt};
use super::MAD_TO_SIGMA;
use crate::signal::AudioSignal;

/// Settings of the transient detector (taken from the rig profile).
#[derive(Debug, Clone, PartialEq)]
pub struct ClickConfig {
    /// High-pass corner, Hz. Default 1000 Hz: above mains hum harmonics and body thumps, below
    /// the bulk of a click's energy.
    pub highpass_hz: f64,
    /// Trigger level in robust noise standard deviations. Default 8: the largest of 10^6
    /// Gaussian noise samples is about 5 sigma, so noise alone almost never triggers.
    pub threshold_sigma: f64,
    /// Crossings closer than this belong to one transient, ms. Default 1 ms: one click's ringing.
    pub merge_ms: f64,
    /// Spectral centroid a transient needs to count as a click, Hz. Default 2000 Hz.
    pub min_centroid_hz: f64,
}

impl Default for ClickConfig {
    fn default() -> Self {
        ClickConfig {
            highpass_hz: 1000.0,
            threshold_sigma: 8.0,
            merge_ms: 1.0,
            min_centroid_hz: 2000.0,
        }
    }
}

/// One transient found in the audio.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Transient {
    /// Onset by the AIC picker, audio clock, seconds.
    pub onset_s: f64,
    /// Time of the largest filtered magnitude, audio clock, seconds.
    pub peak_s: f64,
    /// Largest raw sample magnitude from onset to end, dB re full scale.
    pub peak_dbfs: f64,
    /// Largest magnitude of the high-passed signal (1.0 = full scale).
    pub peak_filtered: f64,
    /// Onset to the last sample at or above 10 % (-20 dB) of the filtered peak, ms.
    pub duration_ms: f64,
    /// Onset to filtered peak, ms.
    pub rise_ms: f64,
    /// Power-weighted mean frequency of the raw transient, Hz.
    pub centroid_hz: f64,
    /// Filtered peak over the RMS of the filtered signal in the 20 ms before onset, dB.
    pub snr_db: f64,
    /// Two or more raw samples at full scale within the transient.
    pub clipped: bool,
    /// Whether the transient counts as a click (else a thump).
    pub is_click: bool,
}

/// All transients of one signal, ascending in time, and the noise floor used.
#[derive(Debug, Clone, PartialEq)]
pub struct TransientScan {
    pub transients: Vec<Transient>,
    /// Robust standard deviation of the filtered signal (1.0 = full scale).
    pub noise_sigma: f64,
}

/// Most transients kept from one signal; past this the recording is noise, not clicks.
const MAX_TRANSIENTS: usize = 256;
/// Most samples used for the robust noise floor (strided subsample of the signal).
const NOISE_SAMPLES: usize = 1 << 15;

/// Reusable FFT plans and buffers, one per worker.
pub struct ClickScratch {
    planner: FftPlanner<f64>,
    plans: Vec<(usize, Arc<dyn Fft<f64>>)>,
    buffer: Vec<Complex<f64>>,
}

impl Default for ClickScratch {
    fn default() -> Self {
        ClickScratch {
            planner: FftPlanner::new(),
            plans: Vec::new(),
            buffer: Vec::new(),
        }
    }
}

impl ClickScratch {
    fn plan(&mut self, n: usize) -> Arc<dyn Fft<f64>> {
        if let Some((_, p)) = self.plans.iter().find(|(len, _)| *len == n) {
            return Arc::clone(p);
        }
        let p = self.planner.plan_fft_forward(n);
        self.plans.push((n, Arc::clone(&p)));
        p
    }
}

/// Finds every transient in `signal`.
pub fn scan_transients(
    signal: &AudioSignal,
    config: &ClickConfig,
    scratch: &mut ClickScratch,
) -> TransientScan {
    let fs = signal.sample_rate_hz;
    let x = &signal.samples;
    let sections = butterworth_highpass(4, config.highpass_hz, fs);
    let y = filtfilt(&sections, x);
    let stride = (y.len() / NOISE_SAMPLES).max(1);
    let mut sub: Vec<f64> = y.iter().step_by(stride).map(|v| v.abs()).collect();
    // The high-passed signal has zero median, so the MAD is the median magnitude.
    let noise_sigma = MAD_TO_SIGMA * super::median_in_place(&mut sub);
    let threshold = config.threshold_sigma * noise_sigma;
    let merge = ((config.merge_ms * 1e-3 * fs).round() as usize).max(1);

    // Pass 1: group threshold crossings into [first, last] spans.
    let mut spans: Vec<(usize, usize)> = Vec::new();
    if threshold > 0.0 {
        for (i, v) in y.iter().enumerate() {
            if v.abs() > threshold {
                match spans.last_mut() {
                    Some(span) if i - span.1 <= merge => span.1 = i,
                    _ => {
                        if spans.len() == MAX_TRANSIENTS {
                            break;
                        }
                        spans.push((i, i));
                    }
                }
            }
        }
    }

    let mut transients = Vec::with_capacity(spans.len());
    let mut previous_end = 0usize;
    for &(first, last) in &spans {
        let (peak_idx, peak_filtered) = (first..=last)
            .map(|i| (i, y[i].abs()))
            .fold((first, 0.0), |acc, v| if v.1 > acc.1 { v } else { acc });
        let pre = ((5e-3 * fs) as usize).max(16);
        let start = first.saturating_sub(pre).max(previous_end);
        let post = ((0.2e-3 * fs) as usize).max(4);
        // The zero-phase output crosses the threshold early on a loud click (pre-ringing), so
        // the window runs to just past the peak and the pick may fall after `first`.
        let end = (first + post).max(peak_idx + 1).min(last + 1).min(y.len());
        let warm = start.saturating_sub((10e-3 * fs) as usize);
        let causal = filter_causal(&sections, &x[warm..end]);
        let onset = aic_onset(&causal[start - warm..]).map_or(first, |k| (start + k).min(peak_idx));
        let tenth = 0.1 * peak_filtered;
        let tail = (onset..=last)
            .rev()
            .find(|&i| y[i].abs() >= tenth)
            .unwrap_or(peak_idx);
        let raw_peak = x[onset..=last].iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let clip = 0.999 * signal.clip_level;
        let clipped_samples = x[onset..=last].iter().filter(|v| v.abs() >= clip).count();
        let noise_end = onset.saturating_sub((0.5e-3 * fs) as usize);
        let noise_start = onset
            .saturating_sub((20e-3 * fs) as usize)
            .max(previous_end);
        let noise_rms = if noise_end > noise_start + 32 {
            let w = &y[noise_start..noise_end];
            (w.iter().map(|v| v * v).sum::<f64>() / w.len() as f64).sqrt()
        } else {
            noise_sigma
        };
        let centroid_len = (tail - onset + 1).max((0.5e-3 * fs) as usize);
        let centroid_end = (onset + centroid_len).min(x.len());
        let centroid_hz = spectral_centroid_hz(&x[onset..centroid_end], fs, scratch);
        transients.push(Transient {
            onset_s: onset as f64 / fs,
            peak_s: peak_idx as f64 / fs,
            peak_dbfs: 20.0 * raw_peak.max(1e-12).log10(),
            peak_filtered,
            duration_ms: (tail - onset) as f64 / fs * 1e3,
            rise_ms: (peak_idx - onset.min(peak_idx)) as f64 / fs * 1e3,
            centroid_hz,
            snr_db: 20.0 * (peak_filtered / noise_rms.max(1e-15)).log10(),
            clipped: clipped_samples >= 2,
            is_click: centroid_hz >= config.min_centroid_hz,
        });
        previous_end = last + 1;
    }
    TransientScan {
        transients,
        noise_sigma,
    }
}

/// AIC onset picker (Maeda 1985) on a window: the index k minimising
/// k ln var(x[0..k]) + (N - k - 1) ln var(x[k..N]). `None` for windows under 8 samples.
pub fn aic_onset(x: &[f64]) -> Option<usize> {
    let n = x.len();
    if n < 8 {
        return None;
    }
    let mut prefix = Vec::with_capacity(n + 1);
    let mut prefix_sq = Vec::with_capacity(n + 1);
    let (mut s, mut s2) = (0.0, 0.0);
    prefix.push(0.0);
    prefix_sq.push(0.0);
    for v in x {
        s += v;
        s2 += v * v;
        prefix.push(s);
        prefix_sq.push(s2);
    }
    let var = |a: usize, b: usize| {
        let m = (b - a) as f64;
        let mean = (prefix[b] - prefix[a]) / m;
        ((prefix_sq[b] - prefix_sq[a]) / m - mean * mean).max(1e-300)
    };
    (2..n - 1)
        .map(|k| {
            let aic = k as f64 * var(0, k).ln() + (n - k - 1) as f64 * var(k, n).ln();
            (k, aic)
        })
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(k, _)| k)
}

/// Power-weighted mean frequency of `x` after removing its least-squares line and applying a
/// Hann window, Hz.
pub fn spectral_centroid_hz(x: &[f64], sample_rate_hz: f64, scratch: &mut ClickScratch) -> f64 {
    let n = x.len();
    if n < 4 {
        return 0.0;
    }
    let t: Vec<f64> = (0..n).map(|i| i as f64).collect();
    let (slope, intercept) = super::line_fit(&t, x).unwrap_or((0.0, 0.0));
    let size = n.next_power_of_two().max(64);
    let fft = scratch.plan(size);
    let buf = &mut scratch.buffer;
    buf.clear();
    buf.extend(x.iter().enumerate().map(|(i, v)| {
        let w = 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / (n - 1) as f64).cos();
        Complex::new((v - intercept - slope * i as f64) * w, 0.0)
    }));
    buf.resize(size, Complex::new(0.0, 0.0));
    fft.process(buf);
    let (mut num, mut den) = (0.0, 0.0);
    for (k, c) in buf.iter().enumerate().take(size / 2 + 1).skip(1) {
        let p = c.norm_sqr();
        num += p * k as f64 * sample_rate_hz / size as f64;
        den += p;
    }
    if den > 0.0 {
        num / den
    } else {
        0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn aic_finds_a_variance_step_to_the_sample() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let x: Vec<f64> = (0..400)
            .map(|i| {
                let s = if i >= 250 { 1.0 } else { 0.01 };
                s * (rng.gen::<f64>() - 0.5)
            })
            .collect();
        let k = aic_onset(&x).unwrap();
        assert!((248..=251).contains(&k), "{k}");
    }

    #[test]
    fn aic_handles_a_window_too_short_to_pick() {
        assert_eq!(aic_onset(&[1.0, 2.0, 3.0]), None);
    }

    #[test]
    fn centroid_of_a_pure_tone_is_its_frequency() {
        let fs = 96_000.0;
        let x: Vec<f64> = (0..960)
            .map(|i| (2.0 * std::f64::consts::PI * 6000.0 * i as f64 / fs).sin())
            .collect();
        let c = spectral_centroid_hz(&x, fs, &mut ClickScratch::default());
        assert!((c - 6000.0).abs() < 150.0, "{c}");
    }
}
