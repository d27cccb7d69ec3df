//! Decay of the post-release oscillation: a damped sinusoid fitted by Levenberg-Marquardt,
//! started from the logarithmic decrement of the extrema.
//!
//! Starting at the motion peak, the trace is cut into half-cycles where it crosses a band of
//! two noise standard deviations around the rest level (the median of the later half of the
//! frames after the peak); each half-cycle's extreme frame, refined by a parabola through three
//! frames, is its extremum. A shoulder or a double top never crosses the rest level, so it is
//! part of its half-cycle, not one of its own. Frequency and decay are reported only where two
//! clean cycles show (four swings of at least four noise SD after the peak, at a steady pace
//! and shrinking), else none; the fit ends half a period after the last clean extremum, where
//! the ringing has died into the noise. The peak-to-peak
//! swings D_k between consecutive extrema do not depend on the unknown rest position, and for a
//! viscously damped oscillator they shrink by the same factor every half cycle, so
//! ln D_k = c + k ln(r) / 2, where r is the amplitude ratio per full cycle. r comes from a
//! least-squares line through ln D_k; the damped frequency from a line through the extremum
//! times (half a period per step). These start a Levenberg-Marquardt fit (Marquardt 1963) of
//! y = c + e^{-s t} (a cos wd t + b sin wd t) over the frames of those extrema, which uses
//! every frame rather than the noisiest ones (picked extrema are biased outwards by noise).
//! Log decrement delta = s 2 pi / wd = -ln r; damping ratio zeta = delta / sqrt(4 pi^2 +
//! delta^2) (e.g. Thomson, Theory of Vibration, sec. 2.7).

use serde::{Deserialize, Serialize};

/// The fitted oscillation after the motion peak.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Oscillation {
    /// Damped frequency, Hz.
    pub frequency_hz: f64,
    /// Amplitude ratio over one full cycle (successive peaks of the same sign), 0..1.
    pub amplitude_ratio: f64,
    /// Energy kept per full cycle, the amplitude ratio squared.
    pub energy_retention: f64,
    /// Logarithmic decrement per full cycle, -ln(amplitude_ratio).
    pub log_decrement: f64,
    /// Damping ratio, delta / sqrt(4 pi^2 + delta^2).
    pub damping_ratio: f64,
    /// Number of extrema used, the motion peak included.
    pub extrema_used: usize,
    /// Standard uncertainty of `amplitude_ratio` from the fit's covariance (null without a fit).
    pub amplitude_ratio_sd: Option<f64>,
    /// The fitted model [c, a, b, s, wd]: y = c + e^{-s u}(a cos wd u + b sin wd u), u = t -
    /// `model_t0_s` (video clock); null without a fit. For drawing the fit over the data.
    #[serde(default)]
    pub model: Option<[f64; 5]>,
    #[serde(default)]
    pub model_t0_s: Option<f64>,
}

/// Most extrema used: the first few cycles carry the decay; later ones drown in noise.
const MAX_EXTREMA: usize = 12;
/// Half-width of the band around the rest level, in noise SD, that the trace must cross to
/// start a new half-cycle.
const REST_BAND_SIGMA: f64 = 2.0;
/// Least peak-to-peak swing, in noise SD, that counts as a clean half-cycle.
const CLEAR_SWING_SIGMA: f64 = 4.0;

/// The motion peak and the extremum of each half-cycle after it. A half-cycle runs from one
/// crossing of the band around the rest level to the next, so a shoulder or a double top
/// (which never crosses the rest level) is part of its half-cycle, not one of its own. The
/// rest level is the median of the later half of the frames after the peak. Each extremum is
/// the half-cycle's extreme frame refined by a parabola through three frames.
fn half_cycle_extrema(
    t: &[f64],
    y: &[f64],
    peak_index: usize,
    peak: (f64, f64),
    direction: f64,
    noise_sigma: f64,
) -> Vec<(f64, f64)> {
    let n = y.len();
    let mut extrema = vec![peak];
    if peak_index + 8 >= n {
        return extrema;
    }
    let rest = super::median(&y[(peak_index + n) / 2..]);
    let band = REST_BAND_SIGMA * noise_sigma;
    // Side of the current half-cycle: +1 above the rest level (in the sign-adjusted measure),
    // -1 below; the peak's half-cycle is above.
    let mut side = 1.0;
    let mut best: Option<usize> = None;
    for i in peak_index + 1..n {
        let v = direction * (y[i] - rest);
        if side * v < -band {
            // Crossed to the other side: the half-cycle just left ends.
            if let Some(k) = best.take() {
                extrema.push(super::refine_extremum(t, y, k));
            }
            side = -side;
            if extrema.len() >= MAX_EXTREMA {
                break;
            }
        }
        let on_side = side * v > band;
        let beyond = |k: usize| side * direction * (y[i] - y[k]) > 0.0;
        // The peak's own half-cycle is already counted.
        if on_side && (extrema.len() > 1 || side < 0.0) && best.is_none_or(beyond) {
            best = Some(i);
        }
    }
    extrema
}

/// The swings between consecutive extrema (and the extrema's times) that stand clear of the
/// noise and keep shrinking at a steady pace, from the first extremum on.
fn clean_swings(extrema: &[(f64, f64)], noise_sigma: f64) -> (Vec<f64>, Vec<f64>) {
    let mut swings: Vec<f64> = Vec::new();
    let Some(first) = extrema.first() else {
        return (swings, Vec::new());
    };
    let mut times = vec![first.0];
    for k in 1..extrema.len() {
        let d = (extrema[k].1 - extrema[k - 1].1).abs();
        let half = extrema[k].0 - extrema[k - 1].0;
        let first_half = times.get(1).map(|t1| t1 - times[0]);
        let steady = first_half.is_none_or(|h| half > 0.5 * h && half < 1.5 * h);
        let shrinking = swings.last().is_none_or(|last| d <= 1.2 * last);
        let clear =
            d >= CLEAR_SWING_SIGMA * noise_sigma && swings.first().is_none_or(|d0| d >= 0.03 * d0);
        if !(steady && shrinking && clear) {
            break;
        }
        swings.push(d);
        times.push(extrema[k].0);
    }
    (swings, times)
}

/// Builds the oscillation measures from a per-cycle amplitude ratio and a frequency.
pub fn from_ratio(frequency_hz: f64, amplitude_ratio: f64, extrema_used: usize) -> Oscillation {
    let log_decrement = -amplitude_ratio.ln();
    Oscillation {
        frequency_hz,
        amplitude_ratio,
        energy_retention: amplitude_ratio * amplitude_ratio,
        log_decrement,
        damping_ratio: log_decrement
            / (4.0 * std::f64::consts::PI * std::f64::consts::PI + log_decrement * log_decrement)
                .sqrt(),
        extrema_used,
        amplitude_ratio_sd: None,
        model: None,
        model_t0_s: None,
    }
}

/// Measures the oscillation that starts at the motion peak (frame `peak_index`, refined time and
/// value `peak`), moving first in direction `-direction`. Returns the oscillation and the time
/// of the fitted model's first extremum (a motion peak estimate that uses every frame of the
/// first cycles). `None` when fewer than two clean cycles stand out of the noise (overdamped,
/// ringing that dies within a cycle and a half, or too short a record).
pub fn detect_oscillation(
    t: &[f64],
    y: &[f64],
    peak_index: usize,
    peak: (f64, f64),
    direction: f64,
    noise_sigma: f64,
    period_s: f64,
) -> Option<(Oscillation, Option<(f64, f64)>)> {
    let all = half_cycle_extrema(t, y, peak_index, peak, direction, noise_sigma);
    // A part that hits a hard stop turns back in a cusp, part-way through a cycle of the
    // ringing that follows: when the cycles from the peak are not steady, the ringing is
    // measured from the first extremum after it (the peak itself never moves).
    let from_peak = clean_swings(&all, noise_sigma);
    let (extrema, (swings, times), start_index, start) = match (from_peak.0.len() < 4, all.get(1)) {
        (true, Some(&next)) => (
            &all[1..],
            clean_swings(&all[1..], noise_sigma),
            t.partition_point(|v| *v < next.0)
                .min(t.len().saturating_sub(1)),
            next,
        ),
        _ => (&all[..], from_peak, peak_index, peak),
    };
    let after_cusp = start_index != peak_index;
    let (peak_index, peak) = (start_index, start);
    // Two clean cycles: four swings after the peak.
    if swings.len() < 4 {
        return None;
    }
    let k: Vec<f64> = (0..swings.len()).map(|k| k as f64).collect();
    let ln_d: Vec<f64> = swings.iter().map(|d| d.ln()).collect();
    let (slope, _) = super::line_fit(&k, &ln_d)?;
    let idx: Vec<f64> = (0..times.len()).map(|k| k as f64).collect();
    let (half_period_s, _) = super::line_fit(&idx, &times)?;
    let ratio0 = (2.0 * slope).exp();
    // At least four frames per cycle to call it an oscillation and not sampling noise.
    if !(ratio0 > 0.0 && ratio0 < 1.0) || half_period_s < 2.0 * period_s {
        return None;
    }
    let f0 = 1.0 / (2.0 * half_period_s);
    let last = extrema.len().min(times.len()) - 1;
    let rest0 = 0.5 * (extrema[last].1 + extrema[last - 1].1);
    let end_s = times[times.len() - 1] + half_period_s;
    let stop = t.partition_point(|v| *v <= end_s).min(t.len());
    let fitted = (stop > peak_index + 8)
        .then(|| {
            fit_damped(
                &t[peak_index..stop],
                &y[peak_index..stop],
                peak.0,
                [
                    rest0,
                    peak.1 - rest0,
                    0.0,
                    -ratio0.ln() * f0,
                    2.0 * std::f64::consts::PI * f0,
                ],
            )
        })
        .flatten();
    let ratio_of = |p: &[f64; 5]| (-p[3] * 2.0 * std::f64::consts::PI / p[4]).exp();
    let (frequency_hz, amplitude_ratio, ratio_sd, first_extremum_s) = match fitted {
        Some((p, cov)) => (
            p[4] / (2.0 * std::f64::consts::PI),
            ratio_of(&p),
            Some(propagate(&p, &cov, ratio_of)),
            Some((
                peak.0 + first_extremum(&p),
                propagate(&p, &cov, first_extremum),
            )),
        ),
        None => (f0, ratio0, None, None),
    };
    if !(amplitude_ratio > 0.0 && amplitude_ratio < 1.0) {
        return None;
    }
    let mut oscillation = from_ratio(frequency_hz, amplitude_ratio, times.len());
    oscillation.amplitude_ratio_sd = ratio_sd;
    if let Some((p, _)) = fitted {
        oscillation.model = Some(p);
        oscillation.model_t0_s = Some(peak.0);
    }
    Some((oscillation, first_extremum_s.filter(|_| !after_cusp)))
}

/// The model c + e^{-s u}(a cos w u + b sin w u) at u, and its gradient in [c, a, b, s, w].
fn model_and_gradient(p: &[f64; 5], u: f64) -> (f64, [f64; 5]) {
    let e = (-p[3] * u).exp();
    let (sn, cs) = (p[4] * u).sin_cos();
    let osc = p[1] * cs + p[2] * sn;
    (
        p[0] + e * osc,
        [
            1.0,
            e * cs,
            e * sn,
            -u * e * osc,
            u * e * (-p[1] * sn + p[2] * cs),
        ],
    )
}

/// Parameters [c, a, b, s, w] of a damped-oscillation fit and their covariance matrix.
pub type DampedFit = ([f64; 5], [[f64; 5]; 5]);

/// Levenberg-Marquardt fit of y = c + e^{-s u}(a cos w u + b sin w u), u = t - t0, from the
/// start [c, a, b, s, w]. The covariance is s^2 (J'J)^-1 at the solution, s^2 the residual
/// variance. `None` when it does not converge to a decaying oscillation.
pub fn fit_damped(t: &[f64], y: &[f64], t0: f64, start: [f64; 5]) -> Option<DampedFit> {
    let residual_ss = |p: &[f64; 5]| -> f64 {
        t.iter()
            .zip(y)
            .map(|(&t, &y)| (y - model_and_gradient(p, t - t0).0).powi(2))
            .sum()
    };
    let mut p = start;
    let mut cost = residual_ss(&p);
    let mut lambda = 1e-3;
    for _ in 0..100 {
        let mut jtj = [[0.0f64; 5]; 5];
        let mut jtr = [0.0f64; 5];
        for (&t, &y) in t.iter().zip(y) {
            let (value, j) = model_and_gradient(&p, t - t0);
            let r = y - value;
            for a in 0..5 {
                jtr[a] += j[a] * r;
                for b in 0..5 {
                    jtj[a][b] += j[a] * j[b];
                }
            }
        }
        let mut improved = false;
        while lambda < 1e12 {
            let mut m = jtj;
            for (a, row) in m.iter_mut().enumerate() {
                row[a] += lambda * jtj[a][a].max(1e-300);
            }
            let Some(step) = super::solve_linear(m, jtr) else {
                lambda *= 10.0;
                continue;
            };
            let trial: [f64; 5] = std::array::from_fn(|i| p[i] + step[i]);
            let trial_cost = residual_ss(&trial);
            if trial_cost.is_finite() && trial_cost < cost {
                let gain = (cost - trial_cost) / cost.max(1e-300);
                p = trial;
                cost = trial_cost;
                lambda = (lambda * 0.3).max(1e-12);
                improved = gain > 1e-12;
                break;
            }
            lambda *= 10.0;
        }
        if !improved {
            break;
        }
    }
    if !(p[3] > 0.0 && p[4] > 0.0 && p.iter().all(|v| v.is_finite())) || t.len() <= 5 {
        return None;
    }
    let mut jtj = [[0.0f64; 5]; 5];
    for &t in t {
        let (_, j) = model_and_gradient(&p, t - t0);
        for a in 0..5 {
            for b in 0..5 {
                jtj[a][b] += j[a] * j[b];
            }
        }
    }
    let variance = cost / (t.len() - 5) as f64;
    let mut cov = [[0.0; 5]; 5];
    for k in 0..5 {
        let mut unit = [0.0; 5];
        unit[k] = 1.0;
        let column = super::solve_linear(jtj, unit)?;
        for (row, v) in column.iter().enumerate() {
            cov[row][k] = v * variance;
        }
    }
    Some((p, cov))
}

/// First extremum of the fitted model after (or nearest) u = 0: d/du = 0 where
/// tan(w u + phi) = -s / w, phi = atan2(-b, a).
fn first_extremum(p: &[f64; 5]) -> f64 {
    let [_, a, b, decay, wd] = *p;
    let phi = (-b).atan2(a);
    let mut t_ext = ((-decay / wd).atan() - phi) / wd;
    let half = std::f64::consts::PI / wd;
    while t_ext < -0.5 * half {
        t_ext += half;
    }
    while t_ext > 0.5 * half {
        t_ext -= half;
    }
    t_ext
}

/// Standard deviation of `f(p)` by first-order propagation of `cov` (numerical gradient).
fn propagate(p: &[f64; 5], cov: &[[f64; 5]; 5], f: impl Fn(&[f64; 5]) -> f64) -> f64 {
    let base = f(p);
    let grad: Vec<f64> = (0..5)
        .map(|i| {
            let h = (p[i].abs() * 1e-6).max(1e-9);
            let mut q = *p;
            q[i] += h;
            (f(&q) - base) / h
        })
        .collect();
    let mut var = 0.0;
    for a in 0..5 {
        for b in 0..5 {
            var += grad[a] * cov[a][b] * grad[b];
        }
    }
    var.max(0.0).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Free response from rest: x = e^{-s t} (cos wd t + s/wd sin wd t).
    fn ring(fps: f64, f_hz: f64, ratio: f64) -> (Vec<f64>, Vec<f64>) {
        let wd = 2.0 * std::f64::consts::PI * f_hz;
        let s = -ratio.ln() * f_hz;
        // 30 ms: three cycles at 100 Hz and 20 kfps, so that two whole ones show.
        let t: Vec<f64> = (0..600).map(|k| k as f64 / fps).collect();
        let y = t
            .iter()
            .map(|&t| 50.0 + 20.0 * (-s * t).exp() * ((wd * t).cos() + s / wd * (wd * t).sin()))
            .collect();
        (t, y)
    }

    #[test]
    fn shoulders_and_double_tops_are_not_half_cycles() {
        // Issue 14, condition 7: a 100 Hz ring with a 500 Hz mode of a fifth of its amplitude
        // riding on it. The small mode makes shoulders and double tops that never cross the
        // rest level; they must not be read as half-cycles (which would give 300-500 Hz).
        let fps = 20_000.0;
        let (t, mut y) = ring(fps, 100.0, 0.6);
        for (v, &tk) in y.iter_mut().zip(&t) {
            *v += 4.0 * (2.0 * std::f64::consts::PI * 500.0 * tk).sin() * (-60.0 * tk).exp();
        }
        let (o, _) = detect_oscillation(&t, &y, 0, (t[0], y[0]), 1.0, 0.05, 1.0 / fps).unwrap();
        assert!(
            (o.frequency_hz / 100.0 - 1.0).abs() < 0.05,
            "{}",
            o.frequency_hz
        );
    }

    #[test]
    fn fewer_than_two_clean_cycles_give_no_oscillation() {
        // A ring that loses four fifths of its amplitude per cycle, in noise that hides it
        // after the first cycle and a half: no frequency or decay is reported.
        let fps = 20_000.0;
        let (t, y) = ring(fps, 100.0, 0.2);
        let noise_sigma = 0.25;
        assert!(detect_oscillation(&t, &y, 0, (t[0], y[0]), 1.0, noise_sigma, 1.0 / fps).is_none());
        // The same ring with noise ten times smaller shows its cycles.
        assert!(detect_oscillation(&t, &y, 0, (t[0], y[0]), 1.0, 0.025, 1.0 / fps).is_some());
    }

    #[test]
    fn thomson_example_decrement_comes_back_within_one_percent() {
        // Thomson, Theory of Vibration with Applications, Example 2.7-1: log decrement 0.429,
        // zeta = 0.0681.
        let ratio = (-0.429f64).exp();
        let (t, y) = ring(20_000.0, 100.0, ratio);
        let (o, first) = detect_oscillation(&t, &y, 0, (t[0], y[0]), 1.0, 1e-4, 5e-5).unwrap();
        assert!(first.unwrap().0.abs() < 1e-6, "{first:?}");
        assert!(
            (o.log_decrement - 0.429).abs() < 0.00429,
            "{}",
            o.log_decrement
        );
        assert!(
            (o.damping_ratio - 0.0681).abs() < 0.000681,
            "{}",
            o.damping_ratio
        );
        assert!((o.frequency_hz - 100.0).abs() < 0.5, "{}", o.frequency_hz);
    }

    #[test]
    fn ringing_after_a_hit_on_a_hard_stop_is_measured_from_the_first_rebound() {
        // A part that hits a stop 0.3 above its rest level and leaves it at speed rings freely
        // from there: y0 cos(w u) + (v0 + s y0) / w sin(w u), decaying by 0.5 per cycle. The
        // first swing takes well under half a period, so the cycles from the peak are not steady.
        let (fps, f_hz, ratio) = (10_000.0, 150.0, 0.5f64);
        let w = 2.0 * std::f64::consts::PI * f_hz;
        let s = -ratio.ln() * f_hz;
        let (y0, v0) = (0.3, -3.0 * w * 0.3);
        let t: Vec<f64> = (0..1000).map(|k| k as f64 / fps).collect();
        let y: Vec<f64> = t
            .iter()
            .map(|&u| (-s * u).exp() * (y0 * (w * u).cos() + (v0 + s * y0) / w * (w * u).sin()))
            .collect();
        let (o, first) = detect_oscillation(&t, &y, 0, (0.0, y0), 1.0, 1e-3, 1.0 / fps).unwrap();
        assert!(
            (o.frequency_hz / f_hz - 1.0).abs() < 0.01,
            "{}",
            o.frequency_hz
        );
        assert!(
            (o.amplitude_ratio - ratio).abs() < 0.01,
            "{}",
            o.amplitude_ratio
        );
        // The model starts after the peak, so it gives no estimate of the peak.
        assert_eq!(first, None);
    }

    #[test]
    fn overdamped_decay_is_no_oscillation() {
        let t: Vec<f64> = (0..400).map(|k| k as f64 * 1e-3).collect();
        let y: Vec<f64> = t.iter().map(|&t| 50.0 + 20.0 * (-t / 0.02).exp()).collect();
        assert!(detect_oscillation(&t, &y, 0, (0.0, 70.0), 1.0, 0.01, 1e-3).is_none());
    }
}
