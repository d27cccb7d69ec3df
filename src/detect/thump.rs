//! Thumps: low-frequency transients (a part or a specimen landing, a hand on the bench, a door)
//! that the click search never hears, because it listens above its 1 kHz high-pass. They are
//! not timed for any measure; they are listed so a person reviewing a trial sees them.
//!
//! The audio is averaged in blocks down to about 4 kHz, band-passed 20-400 Hz by zero-phase
//! Butterworth filters and kept at about 1 kHz; the power of its envelope (the analytic
//! signal's squared magnitude, so a steady hum's power does not swing with its phase) is
//! averaged over 5 ms windows. The steady background (noise, mains hum, a running motor) sets
//! the median window energy and the spread of the window energies about it. A thump is a run
//! of windows lasting at least [`ThumpConfig::min_duration_ms`] above both
//! [`ThumpConfig::min_rise_db`] over the median and [`ThumpConfig::spread_sigmas`] robust
//! standard deviations over it, that does not overlap a click (a loud click carries some
//! low-frequency energy of its own) or the record's ends. A steady hum barely spreads the
//! window energies, so a thump a few dB over the hum stands out; over noise alone the spread
//! sets the level. Its onset is the start of the earliest window, walking back from the run,
//! still 3 dB and three robust standard deviations over the median.

use rustfft::num_complex::Complex;
use rustfft::FftPlanner;

use super::filter::{butterworth_highpass, butterworth_lowpass, filtfilt};
use crate::signal::AudioSignal;

/// Settings of the thump search.
#[derive(Debug, Clone, PartialEq)]
pub struct ThumpConfig {
    /// Band, Hz: below the click search's high-pass, above the drift of a DC offset.
    pub low_hz: f64,
    pub high_hz: f64,
    /// Energy window, ms.
    pub window_ms: f64,
    /// Least rise over the median window energy, dB. Default 6.
    pub min_rise_db: f64,
    /// Rise over the median in robust standard deviations of the window energies (1.4826 times
    /// their median absolute deviation). Default 8: over noise alone a 5 ms window in a 380 Hz
    /// band has about 3.8 degrees of freedom, its energy's standard deviation is about 0.7 of
    /// its mean, and 8 of them (6.6 times the mean) is passed by chance about once in 20,000
    /// windows (chi-square tail), by two windows in a row hardly ever.
    pub spread_sigmas: f64,
    /// Shortest run above the rise, ms. Default 10: a thump lasts tens of ms.
    pub min_duration_ms: f64,
}

impl Default for ThumpConfig {
    fn default() -> Self {
        ThumpConfig {
            low_hz: 20.0,
            high_hz: 400.0,
            window_ms: 5.0,
            min_rise_db: 6.0,
            spread_sigmas: 8.0,
            min_duration_ms: 10.0,
        }
    }
}

/// Stretch at each end of the record where no run may lie, seconds: the zero-phase filters and
/// the envelope's FFT ring there.
const EDGE_S: f64 = 0.025;

/// Rate the audio is averaged down to before filtering, Hz.
const WORKING_RATE_HZ: f64 = 4000.0;

/// Rate the band-passed signal is kept at for its envelope, Hz: over twice its 400 Hz top.
const ENVELOPE_RATE_HZ: f64 = 1000.0;

/// Onsets of the thumps in `signal` (audio clock, seconds, ascending). `clicks` are the spans,
/// audio clock, that a run may not overlap.
pub fn detect_thumps(
    signal: &AudioSignal,
    clicks: &[(f64, f64)],
    config: &ThumpConfig,
) -> Vec<f64> {
    let block = (signal.sample_rate_hz / WORKING_RATE_HZ).floor().max(1.0) as usize;
    let filter_rate_hz = signal.sample_rate_hz / block as f64;
    let averaged: Vec<f64> = signal
        .samples
        .chunks_exact(block)
        .map(|c| c.iter().sum::<f64>() / block as f64)
        .collect();
    // Under 40 windows (0.2 s) the median is no background.
    if (averaged.len() as f64) < 40.0 * config.window_ms * 1e-3 * filter_rate_hz {
        return Vec::new();
    }
    let band = filtfilt(
        &butterworth_lowpass(4, config.high_hz, filter_rate_hz),
        &filtfilt(
            &butterworth_highpass(2, config.low_hz, filter_rate_hz),
            &averaged,
        ),
    );
    drop(averaged);
    // The band ends at 400 Hz: every `step`-th sample (about 1 kHz) carries it, and the
    // envelope's FFT of a long recording is a quarter the size.
    let step = (filter_rate_hz / ENVELOPE_RATE_HZ).floor().max(1.0) as usize;
    let rate_hz = filter_rate_hz / step as f64;
    let kept: Vec<f64> = band.iter().step_by(step).copied().collect();
    drop(band);
    let window = ((config.window_ms * 1e-3 * rate_hz).round() as usize).max(1);
    let power = envelope_power(&kept);
    let energy: Vec<f64> = power
        .chunks_exact(window)
        .map(|c| c.iter().sum::<f64>() / window as f64)
        .collect();
    let median = super::median(&energy).max(f64::MIN_POSITIVE);
    let mut deviations: Vec<f64> = energy.iter().map(|e| (e - median).abs()).collect();
    let spread = super::MAD_TO_SIGMA * super::median_in_place(&mut deviations);
    let window_s = window as f64 / rate_hz;
    let shortest = (config.min_duration_ms * 1e-3 / window_s).ceil().max(1.0) as usize;
    let high = (median * 10f64.powf(config.min_rise_db / 10.0))
        .max(median + config.spread_sigmas * spread);
    let lead_in = (median * 10f64.powf(0.3)).max(median + 3.0 * spread);
    // The filters and the envelope ring at the record's ends.
    let edge = (EDGE_S / window_s).ceil() as usize;
    let overlaps_click = |a: usize, b: usize| {
        let (from, to) = (a as f64 * window_s, b as f64 * window_s);
        clicks.iter().any(|&(c0, c1)| from <= c1 && to >= c0)
    };
    let mut onsets: Vec<f64> = runs_above(&energy, high)
        .into_iter()
        .filter(|&(a, b)| b - a >= shortest && a >= edge && b + edge <= energy.len())
        .filter(|&(a, b)| !overlaps_click(a, b))
        .map(|(a, _)| {
            let start = (0..a).rev().take_while(|&k| energy[k] > lead_in).last();
            start.unwrap_or(a) as f64 * window_s
        })
        .collect();
    // Two runs split by a brief dip walk back to one start.
    onsets.dedup_by(|b, a| *b - *a < 2.0 * window_s);
    onsets
}

/// Squared magnitude of the analytic signal of `x` (x plus i times its Hilbert transform), by
/// FFT: the negative frequencies zeroed, the positive ones doubled.
fn envelope_power(x: &[f64]) -> Vec<f64> {
    let n = x.len();
    let mut planner = FftPlanner::new();
    let mut spectrum: Vec<Complex<f64>> = x.iter().map(|&v| Complex::new(v, 0.0)).collect();
    planner.plan_fft_forward(n).process(&mut spectrum);
    for (k, c) in spectrum.iter_mut().enumerate().skip(1) {
        if 2 * k < n {
            *c *= 2.0;
        } else if 2 * k > n {
            *c = Complex::new(0.0, 0.0);
        }
    }
    planner.plan_fft_inverse(n).process(&mut spectrum);
    let scale = 1.0 / (n as f64 * n as f64);
    spectrum.iter().map(|c| c.norm_sqr() * scale).collect()
}

/// Runs of `energy` above `level`: (first index, one past the last).
fn runs_above(energy: &[f64], level: f64) -> Vec<(usize, usize)> {
    let mut runs = Vec::new();
    let mut start = None;
    for (k, &e) in energy.iter().enumerate() {
        match (e > level, start) {
            (true, None) => start = Some(k),
            (false, Some(a)) => {
                runs.push((a, k));
                start = None;
            }
            _ => {}
        }
    }
    runs.extend(start.map(|a| (a, energy.len())));
    runs
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    /// One second at 48 kHz: noise at -60 dBFS, mains hum at -40 dBFS, and a 60 Hz thump of
    /// 40 ms (Hann envelope, peak -20 dBFS) at `thump_s`.
    fn signal(thump_s: Option<f64>) -> AudioSignal {
        let fs = 48_000.0;
        let mut signal = crate::detect::click::tests::noise_signal(fs, 1.0, 1e-3, 3);
        for (i, v) in signal.samples.iter_mut().enumerate() {
            *v += 0.01 * (2.0 * PI * 50.0 * i as f64 / fs).sin();
        }
        if let Some(at) = thump_s {
            let (start, len) = ((at * fs) as usize, (0.04 * fs) as usize);
            for j in 0..len {
                let u = j as f64 / len as f64;
                let w = 0.5 - 0.5 * (2.0 * PI * u).cos();
                signal.samples[start + j] += 0.1 * w * (2.0 * PI * 60.0 * j as f64 / fs).sin();
            }
        }
        signal
    }

    #[test]
    fn a_low_thump_over_hum_is_found_near_its_start() {
        let found = detect_thumps(&signal(Some(0.4)), &[], &ThumpConfig::default());
        assert_eq!(found.len(), 1, "{found:?}");
        // The Hann envelope is 6 dB over the median (hum and noise) within a few ms of its
        // start; windows are 5 ms.
        assert!((found[0] - 0.4).abs() < 0.012, "{found:?}");
    }

    #[test]
    fn the_envelope_power_of_a_sinusoid_is_steady() {
        // A cosine of amplitude 2 has the analytic signal 2 exp(i w t): power 4 at every sample
        // (whole cycles, so no edge effects).
        let x: Vec<f64> = (0..1000)
            .map(|i| 2.0 * (2.0 * PI * 25.0 * i as f64 / 1000.0).cos())
            .collect();
        for p in envelope_power(&x) {
            assert!((p - 4.0).abs() < 1e-9, "{p}");
        }
    }

    #[test]
    fn steady_hum_and_noise_hold_no_thump() {
        assert!(detect_thumps(&signal(None), &[], &ThumpConfig::default()).is_empty());
    }

    #[test]
    fn a_thump_starting_inside_a_click_is_left_to_the_click() {
        let found = detect_thumps(&signal(Some(0.4)), &[(0.39, 0.42)], &ThumpConfig::default());
        assert!(found.is_empty(), "{found:?}");
    }
}
