//! Latch release and motion peak on the video clock.
//!
//! The motion rate is the finite difference of the motion measure over a window of w frames,
//! w the smallest of 1, 2, 4, ... 64 frames over which the largest change stands at least
//! eight noise standard deviations clear (one frame at ordinary frame rates; more at tens of
//! thousands of frames per second, where one frame moves little). The fast phase is the run
//! around the largest rate; a trial has a release only when that phase moves the measure by
//! `min_jump_sigma` per-frame noise standard deviations or more, and lasts no longer than
//! `max_release_ms` (a slow relaxation of a failed trigger is not a release).
//!
//! Definitions (see README):
//! - latch release: the start of the fast phase, where the accelerating motion begins. With
//!   three or more frames on the rising edge (rate below 70 % of its peak), a straight line (the
//!   slow drift before) joined by a parabola (constant initial acceleration, as a spring let go
//!   from rest) is fitted by least squares and its joint is the release. With fewer frames (low
//!   frame rates), the time at which the rate crosses `rate_fraction` (default 10 %) of its
//!   peak: from a straight line through the rate samples between 20 % and 80 % of the peak
//!   when there are three or more, else interpolated between the two rate samples either side.
//!   A latch that lets go progressively creeps before it snaps; this definition times the snap.
//! - motion peak: the first extremum after the release in the direction of the motion, found
//!   with a hysteresis of eight noise standard deviations (or 5 % of the jump) and refined by a parabola through the
//!   three frames around it. With no overshoot (overdamped), the motion peak is where the rate
//!   falls back through the same fraction of its peak.

use serde::{Deserialize, Serialize};

/// Settings of the release detector (taken from the rig profile).
#[derive(Debug, Clone, PartialEq)]
pub struct ReleaseConfig {
    /// Fraction of the peak rate that marks the start of the fast phase. Default 0.1.
    pub rate_fraction: f64,
    /// Smallest fast-phase movement, in per-frame noise standard deviations. Default 15.
    pub min_jump_sigma: f64,
    /// Longest fast phase (release to motion peak), ms. Default 25 ms: spring releases take a
    /// few ms; a relaxing muscle or motor takes tens.
    pub max_release_ms: f64,
}

impl Default for ReleaseConfig {
    fn default() -> Self {
        ReleaseConfig {
            rate_fraction: 0.1,
            min_jump_sigma: 15.0,
            max_release_ms: 25.0,
        }
    }
}

/// The fast phase of one trial.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MotionEvents {
    /// Latch release, video clock, seconds.
    pub release_s: f64,
    /// Index of the last frame before the release.
    pub pre_release_index: usize,
    /// Motion peak, video clock, seconds.
    pub motion_peak_s: f64,
    /// Frame index nearest the motion peak.
    pub motion_peak_index: usize,
    /// Motion measure at the motion peak (interpolated).
    pub motion_peak_value: f64,
    /// +1 when the measure rises during the fast phase, -1 when it falls.
    pub direction: f64,
    /// Peak rate of the measure, units per second (signed).
    pub peak_rate_per_s: f64,
    /// Size of the fast phase, measure units (signed).
    pub jump: f64,
    /// True when the motion overshoots and turns back (an extremum was found).
    pub overshoot: bool,
    /// Standard uncertainty of `release_s`, seconds.
    pub release_sd_s: f64,
    /// Standard uncertainty of `motion_peak_s`, seconds.
    pub motion_peak_sd_s: f64,
}

/// Noise standard deviations the largest change over the rate window must reach.
const MIN_WINDOW_SIGMA: f64 = 8.0;

/// Start of an accelerating motion: least-squares fit, to the frames `..end`, of a straight
/// line (the slow drift before) joined at tau by a parabola (constant initial acceleration, as
/// of a spring let go from rest): y = a + b t + q max(0, t - tau)^2. tau runs over the frames
/// of a window reaching `3 * edge` frames (at least 12) before `end` (short, so that the
/// straight line stays local: a latch may creep before it snaps); the best is refined
/// between frames by a parabola through the residual sums of squares. Returns tau and its
/// standard uncertainty (the 95 % likelihood interval's half-width over 1.96).
fn accelerating_onset(t: &[f64], y: &[f64], end: usize, edge: usize) -> Option<(f64, f64)> {
    let end = end.min(y.len());
    let start = end.saturating_sub((3 * edge).max(12));
    let (tw, yw) = (&t[start..end], &y[start..end]);
    if tw.len() < 8 {
        return None;
    }
    let t0 = tw[0];
    let sse_at = |tau: f64| -> Option<f64> {
        let mut m = [[0.0; 3]; 3];
        let mut v = [0.0; 3];
        for (&ti, &yi) in tw.iter().zip(yw) {
            let u = ti - t0;
            let h = (ti - tau).max(0.0);
            let basis = [1.0, u, h * h];
            for a in 0..3 {
                v[a] += basis[a] * yi;
                for b in 0..3 {
                    m[a][b] += basis[a] * basis[b];
                }
            }
        }
        let c = super::solve_linear(m, v)?;
        Some(
            tw.iter()
                .zip(yw)
                .map(|(&ti, &yi)| {
                    let h = (ti - tau).max(0.0);
                    let r = yi - c[0] - c[1] * (ti - t0) - c[2] * h * h;
                    r * r
                })
                .sum(),
        )
    };
    let candidates: Vec<(usize, f64)> = (2..tw.len() - 2)
        .filter_map(|k| sse_at(tw[k]).map(|v| (k, v)))
        .collect();
    let &(k, best) = candidates.iter().min_by(|a, b| a.1.total_cmp(&b.1))?;
    let around = |k: usize| candidates.iter().find(|c| c.0 == k).map(|c| c.1);
    let tau = match (around(k.wrapping_sub(1)), around(k + 1)) {
        (Some(a), Some(c)) => {
            match super::parabola_vertex((tw[k - 1], a), (tw[k], best), (tw[k + 1], c)) {
                Some((tv, _)) if tv >= tw[k - 1] && tv <= tw[k + 1] => tv,
                _ => tw[k],
            }
        }
        _ => tw[k],
    };
    let profile: Vec<Option<f64>> = (0..tw.len()).map(around).collect();
    let limit = best.max(1e-300) * (3.84 / tw.len() as f64).exp();
    let half_width = super::profile_half_width(tw, &profile, k, limit);
    Some((tau, half_width / 1.96))
}

/// Time at which the rising edge of the rate crosses `level`, from a least-squares line through
/// the rate samples between 20 % and 80 % of the peak on the edge that ends at the peak. Many
/// frames on the edge (high frame rates) average the noise out; `None` with fewer than three.
fn edge_crossing(rate: &[f64], mid: &[f64], s: f64, peak: f64, level: f64) -> Option<f64> {
    let last = rate.len() - 1;
    let mut a = last;
    while a > 0 && s * rate[a - 1] > 0.2 * peak {
        a -= 1;
    }
    let (x, y): (Vec<f64>, Vec<f64>) = (a..=last)
        .filter(|&i| (0.2 * peak..=0.8 * peak).contains(&(s * rate[i])))
        .map(|i| (mid[i], s * rate[i]))
        .unzip();
    if x.len() < 3 {
        return None;
    }
    let (slope, intercept) = super::line_fit(&x, &y)?;
    (slope > 0.0).then(|| (level - intercept) / slope)
}

/// Per-frame noise standard deviation of `y`, from the median absolute first difference.
pub fn frame_noise_sigma(y: &[f64]) -> f64 {
    let mut d: Vec<f64> = y.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    super::MAD_TO_SIGMA * super::median_in_place(&mut d) / std::f64::consts::SQRT_2
}

/// Finds the fast phase in (t, y), or `None` when there is no abrupt change (a failed trigger).
pub fn detect_release(
    t: &[f64],
    y: &[f64],
    period_s: f64,
    noise_sigma: f64,
    config: &ReleaseConfig,
) -> Option<MotionEvents> {
    let n = y.len();
    if n < 8 {
        return None;
    }
    // Smallest window over which the largest change is clearly more than noise.
    let diff_sigma = (noise_sigma * std::f64::consts::SQRT_2).max(f64::MIN_POSITIVE);
    let w = (0..7)
        .map(|p| 1usize << p)
        .take_while(|w| *w <= n / 8)
        .find(|&w| {
            let biggest = (0..n - w).fold(0.0f64, |m, i| m.max((y[i + w] - y[i]).abs()));
            biggest >= MIN_WINDOW_SIGMA * diff_sigma
        })?;
    let rate: Vec<f64> = (0..n - w)
        .map(|i| (y[i + w] - y[i]) / (t[i + w] - t[i]).max(1e-12))
        .collect();
    let mid: Vec<f64> = (0..n - w).map(|i| 0.5 * (t[i] + t[i + w])).collect();
    let (i_max, peak_rate) = rate
        .iter()
        .copied()
        .enumerate()
        .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()))?;
    let s = peak_rate.signum();
    let peak = peak_rate.abs();
    if peak == 0.0 {
        return None;
    }
    let level = config.rate_fraction * peak;

    let mut j = i_max;
    while j > 0 && s * rate[j - 1] > level {
        j -= 1;
    }
    // Rising edge: back from the peak rate to where the rate first reaches 70 % of it.
    let mut e = i_max;
    while e > j && s * rate[e - 1] >= 0.7 * peak {
        e -= 1;
    }
    let fitted = (e >= j + 3)
        .then(|| accelerating_onset(t, y, e + w, e.saturating_sub(j)))
        .flatten()
        .filter(|(r, _)| {
            *r >= mid[j.saturating_sub(1)] - 2.0 * w as f64 * period_s && *r <= mid[e]
        });
    let quantisation_sd = period_s / 12f64.sqrt();
    let (release_s, release_sd_s) = fitted
        .map(|(r, sd)| (r, sd.max(0.05 * period_s)))
        .or_else(|| {
            edge_crossing(&rate[..=i_max], &mid[..=i_max], s, peak, level)
                .filter(|r| {
                    *r >= mid[j.saturating_sub(1)] - 2.0 * w as f64 * period_s && *r <= mid[i_max]
                })
                .map(|r| (r, quantisation_sd))
        })
        .unwrap_or_else(|| {
            if j == 0 {
                (mid[0], quantisation_sd)
            } else {
                let (r0, r1) = (s * rate[j - 1], s * rate[j]);
                let f = ((level - r0) / (r1 - r0)).clamp(0.0, 1.0);
                let dt = mid[j] - mid[j - 1];
                // Rate noise moves the crossing by (rate noise) / (rate slope).
                let rate_noise = noise_sigma * std::f64::consts::SQRT_2 / (w as f64 * period_s);
                let slope = ((r1 - r0) / dt).abs().max(f64::MIN_POSITIVE);
                let sd = quantisation_sd.hypot(rate_noise / slope).min(dt);
                (mid[j - 1] + f * dt, sd)
            }
        });
    let pre_release_index = j.saturating_sub(1).min(n - 1);
    let start_value = y[pre_release_index];

    let delta_floor = 8.0 * noise_sigma;
    let mut ext_idx = (i_max + w).min(n - 1);
    let mut ext = s * y[ext_idx];
    let mut overshoot = false;
    for (i, v) in y.iter().enumerate().skip(ext_idx + 1) {
        let sv = s * v;
        if sv > ext {
            ext = sv;
            ext_idx = i;
        } else {
            let delta = delta_floor.max(0.05 * (ext - s * start_value).abs());
            if ext - sv > delta {
                overshoot = true;
                break;
            }
        }
    }
    let mut motion_peak_sd_s = quantisation_sd;
    let (motion_peak_s, motion_peak_value, motion_peak_index) = if overshoot {
        let (tp, yp) = super::refine_extremum(t, y, ext_idx);
        motion_peak_sd_s =
            super::vertex_sd(t, y, ext_idx, noise_sigma).clamp(0.05 * period_s, period_s);
        (tp, yp, ext_idx)
    } else {
        // Overdamped: the end of the fast phase is where the rate falls back through the level.
        // The rate must stay under the level for three samples: one noisy dip is not the end.
        let mut k = i_max;
        while k + 1 < rate.len()
            && rate[k + 1..(k + 4).min(rate.len())]
                .iter()
                .any(|r| s * r > level)
        {
            k += 1;
        }
        let end_s = if k + 1 < rate.len() {
            let (r0, r1) = (s * rate[k], s * rate[k + 1]);
            let f = ((r0 - level) / (r0 - r1)).clamp(0.0, 1.0);
            mid[k] + f * (mid[k + 1] - mid[k])
        } else {
            mid[k]
        };
        let idx = t.partition_point(|v| *v < end_s).min(n - 1);
        (end_s, y[idx], idx)
    };
    let jump = motion_peak_value - start_value;
    let too_slow = motion_peak_s - release_s > config.max_release_ms * 1e-3;
    if jump.abs() < config.min_jump_sigma * noise_sigma || motion_peak_s <= release_s || too_slow {
        return None;
    }
    Some(MotionEvents {
        release_s,
        pre_release_index,
        motion_peak_s,
        motion_peak_index,
        motion_peak_value,
        direction: s,
        peak_rate_per_s: peak_rate,
        jump,
        overshoot,
        release_sd_s,
        motion_peak_sd_s,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Half-cosine fast phase from `tr` lasting `dur`, then a damped swing back.
    fn trace(fps: f64, tr: f64, dur: f64) -> (Vec<f64>, Vec<f64>) {
        let t: Vec<f64> = (0..500).map(|k| k as f64 / fps).collect();
        let y = t
            .iter()
            .map(|&t| {
                if t < tr {
                    100.0
                } else if t < tr + dur {
                    100.0 + 30.0 * (1.0 - (std::f64::consts::PI * (t - tr) / dur).cos())
                } else {
                    let tau = t - tr - dur;
                    145.0
                        + 15.0
                            * (-20.0 * tau).exp()
                            * (2.0 * std::f64::consts::PI * 80.0 * tau).cos()
                }
            })
            .collect();
        (t, y)
    }

    #[test]
    fn release_and_peak_of_a_clean_half_cosine_are_within_half_a_frame() {
        let fps = 2000.0;
        let (t, y) = trace(fps, 0.1003, 0.004);
        let ev = detect_release(&t, &y, 1.0 / fps, 0.01, &ReleaseConfig::default()).unwrap();
        assert!(
            (ev.release_s - 0.1003).abs() < 0.5 / fps,
            "{}",
            ev.release_s
        );
        assert!(
            (ev.motion_peak_s - 0.1043).abs() < 0.5 / fps,
            "{}",
            ev.motion_peak_s
        );
        assert!(ev.overshoot);
        assert_eq!(ev.direction, 1.0);
    }

    #[test]
    fn a_slow_drift_without_a_snap_is_no_release() {
        let t: Vec<f64> = (0..500).map(|k| k as f64 * 1e-3).collect();
        let y: Vec<f64> = t.iter().map(|&t| 100.0 - 10.0 * (t / 0.5)).collect();
        assert!(detect_release(&t, &y, 1e-3, 0.5, &ReleaseConfig::default()).is_none());
    }
}
