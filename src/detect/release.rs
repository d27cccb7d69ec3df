//! Latch release and motion peak on the video clock.
//!
//! The motion rate is the finite difference of the motion measure over a window of w frames,
//! w the smallest of 1, 2, 4, ... 64 frames over which the largest change stands eight noise
//! standard deviations clear of the largest change noise alone reaches over the series (one
//! frame at ordinary frame rates; more at tens of thousands of frames per second, where one
//! frame moves little). The fast phase is the run around the largest rate; a trial has a
//! release only when that phase moves the measure by `min_jump_sigma` per-frame noise standard
//! deviations or more, and lasts no longer than `max_release_ms` (a slow relaxation of a
//! failed trigger is not a release).
//!
//! Definitions (see README):
//! - latch release: the start of the fast phase, where the accelerating motion begins. A
//!   straight line (the slow drift before) joined by the displacement of a spring-mass system
//!   let go from rest (damping ratio 0, 0.2, 0.4 or 0.6, whichever fits best; 1 - cos when
//!   undamped) is fitted by least squares, and its joint is the release. The shape's time
//!   scale comes from the time of the peak rate. The fit runs to the peak rate when three or
//!   more frames lie on the rising edge, else to the motion peak. Without a fit, the time at
//!   which the rate crosses `rate_fraction` (default 10 %) of its peak. A latch that lets go
//!   progressively creeps before it snaps; this definition times the snap.
//! - motion peak: the first extremum after the release in the direction of the motion, found
//!   with a hysteresis of eight noise standard deviations (or 5 % of the jump) and refined by
//!   a parabola through the three frames around it. With no overshoot (overdamped), the motion
//!   peak is where the rate falls back through the same fraction of its peak.

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

/// Damping ratios tried for the release shape: undamped (1 - cos) to well damped.
const RELEASE_ZETAS: [f64; 4] = [0.0, 0.2, 0.4, 0.6];

/// Displacement, 0 at rest to its first extremum, of a spring-mass system let go from rest
/// with damping ratio `zeta`, `h` seconds after release, scaled in time so that its speed
/// peaks `h_mid` seconds after release: 1 - exp(-zeta w h) (cos(wd h) + zeta / sqrt(1 -
/// zeta^2) sin(wd h)), held at its first extremum (wd h = pi). For zeta = 0, 1 - cos(wd h).
#[cfg(test)]
fn release_shape(h: f64, h_mid: f64, zeta: f64) -> f64 {
    ReleaseShape::new(h_mid, zeta).at(h)
}

/// [`release_shape`] for one time scale and damping ratio, its constants worked out once:
/// the fits evaluate it at every frame of the window for each trial joint.
struct ReleaseShape {
    wd: f64,
    decay_rate: f64,
    sin_weight: f64,
    h_end: f64,
}

impl ReleaseShape {
    fn new(h_mid: f64, zeta: f64) -> Self {
        let root = (1.0 - zeta * zeta).sqrt();
        let wd = root.atan2(zeta) / h_mid;
        ReleaseShape {
            wd,
            decay_rate: zeta * wd / root,
            sin_weight: zeta / root,
            h_end: std::f64::consts::PI / wd,
        }
    }

    fn at(&self, h: f64) -> f64 {
        if h <= 0.0 {
            return 0.0;
        }
        let h = h.min(self.h_end);
        let decay = (-self.decay_rate * h).exp();
        let (sin, cos) = (self.wd * h).sin_cos();
        1.0 - decay * (cos + self.sin_weight * sin)
    }
}

/// Joints tried first, across the window, before the search goes frame by frame: the
/// residual of the joint changes over tens of frames when the fast phase spans hundreds, so a
/// grid of this size lands within two steps of the least.
const COARSE_JOINTS: usize = 32;

/// Start of a spring's release from rest: least-squares fit, to the frames `start..end`, of a
/// straight line (the slow drift before) joined at tau by the displacement of a spring-mass
/// system let go from rest ([`release_shape`]), whose speed peaks at `t_mid_s` (the measured
/// peak rate): y = a + b t + A shape(t - tau). Near tau the shape is the parabola of constant
/// initial acceleration; unlike that parabola it keeps fitting as the spring's force falls
/// off, so more frames can be used. The damping ratio of the shape is chosen from
/// [`RELEASE_ZETAS`] by the least residual; tau runs over the frames of the window, and the
/// best is refined between frames by golden-section search. Returns tau and its standard
/// uncertainty: the half-width over 1.96 of the 95 % profile-likelihood interval of tau, with
/// the shape and its time scale profiled out.
fn spring_onset(
    t: &[f64],
    y: &[f64],
    start: usize,
    end: usize,
    t_mid_s: f64,
    coarse_joints: usize,
) -> Option<(f64, f64)> {
    let end = end.min(y.len());
    if end < start + 8 {
        return None;
    }
    let (tw, yw) = (&t[start..end], &y[start..end]);
    let t0 = tw[0];
    let syy: f64 = yw.iter().map(|v| v * v).sum();
    // Residual sum of squares of the linear fit for a given tau and shape: syy - c'v.
    let sse_h = |tau: f64, h_mid: f64, zeta: f64| -> Option<f64> {
        if h_mid <= 0.0 {
            return None;
        }
        let shape = ReleaseShape::new(h_mid, zeta);
        let mut m = [[0.0; 3]; 3];
        let mut v = [0.0; 3];
        for (&ti, &yi) in tw.iter().zip(yw) {
            let basis = [1.0, ti - t0, shape.at(ti - tau)];
            for a in 0..3 {
                v[a] += basis[a] * yi;
                for b in a..3 {
                    m[a][b] += basis[a] * basis[b];
                }
            }
        }
        (m[1][0], m[2][0], m[2][1]) = (m[0][1], m[0][2], m[1][2]);
        let c = super::solve_linear(m, v)?;
        Some((syy - c[0] * v[0] - c[1] * v[1] - c[2] * v[2]).max(0.0))
    };
    let sse_at = |tau: f64, zeta: f64| sse_h(tau, t_mid_s - tau, zeta);
    // Every frame before the peak rate is a joint to try; each try costs a pass over the
    // window, so at tens of thousands of frames a second (hundreds of frames in the fast
    // phase) the joints are tried first on a coarse grid of about `coarse_joints`, then
    // frame by frame within two coarse steps of the best.
    let joints: Vec<usize> = (2..tw.len() - 2).filter(|&k| tw[k] < t_mid_s).collect();
    let grid = |zeta: f64| -> Vec<(usize, f64)> {
        let at = |k: usize| sse_at(tw[k], zeta).map(|v| (k, v));
        let step = joints.len().div_ceil(coarse_joints.max(1)).max(1);
        if step == 1 {
            return joints.iter().filter_map(|&k| at(k)).collect();
        }
        let coarse: Vec<(usize, f64)> =
            joints.iter().step_by(step).filter_map(|&k| at(k)).collect();
        let Some(&(best, _)) = coarse.iter().min_by(|a, b| a.1.total_cmp(&b.1)) else {
            return coarse;
        };
        joints
            .iter()
            .filter(|&&k| k + 2 * step >= best && k <= best + 2 * step)
            .filter_map(|&k| at(k))
            .collect()
    };
    // Each shape's tau is refined between frames by golden-section search (the residual sum
    // of squares is far from a parabola there: the fit changes which frames lie on the curve);
    // the shape with the least refined residual wins.
    let refine = |zeta: f64, candidates: &[(usize, f64)]| -> Option<(f64, f64)> {
        let &(k, _) = candidates.iter().min_by(|a, b| a.1.total_cmp(&b.1))?;
        let has = |k: usize| candidates.iter().any(|c| c.0 == k);
        let lo = if has(k.wrapping_sub(1)) {
            tw[k - 1]
        } else {
            tw[k]
        };
        let hi = if has(k + 1) { tw[k + 1] } else { tw[k] };
        let sse = |tau: f64| sse_at(tau, zeta).unwrap_or(f64::INFINITY);
        let tau = golden_min(lo, hi, sse);
        Some((tau, sse(tau)))
    };
    let (tau, _) = RELEASE_ZETAS
        .iter()
        .filter_map(|&z| refine(z, &grid(z)))
        .min_by(|a, b| a.1.total_cmp(&b.1))?;
    // The profile residual at tau, with the shape and the time scale h nuisance parameters:
    // the least over the shapes and over h. The measured peak rate fixes h = t_mid - tau for
    // the estimate, but a peak rate a little off trades against tau (and the shape against
    // h), and holding them fixed made the interval too narrow: it covered 0.58-0.73 of true
    // releases in `validate`. The least over h comes from a parabola through three time
    // scales 15 % apart.
    let profile = |tau: f64| {
        let h0 = t_mid_s - tau;
        RELEASE_ZETAS
            .iter()
            .map(|&z| {
                let f = |h: f64| sse_h(tau, h, z).unwrap_or(f64::INFINITY);
                let (lo, mid, hi) = (f(0.85 * h0), f(h0), f(1.15 * h0));
                let curve = lo + hi - 2.0 * mid;
                let mut least = lo.min(mid).min(hi);
                if curve > 0.0 && curve.is_finite() {
                    let x = (0.5 * (lo - hi) / curve).clamp(-2.0, 2.0);
                    least = least.min(f(h0 * (1.0 + 0.15 * x)));
                }
                least
            })
            .fold(f64::INFINITY, f64::min)
    };
    let best = profile(tau);
    // Five parameters besides the discrete shape: level, slope, size, joint and time scale.
    let limit = super::profile_limit(best, tw.len(), 5);
    let period = (tw[tw.len() - 1] - t0) / (tw.len() - 1) as f64;
    let (lo, hi) = continuous_interval(
        &profile,
        tau,
        0.05 * period,
        0.5 * (tw[tw.len() - 1] - t0),
        limit,
    );
    Some((tau, 0.5 * (hi - lo) / 1.96))
}

/// Ends of the interval about `x0` where the profile `f` stays at or under `limit`: on each
/// side, steps doubling from `step` until `f` exceeds it, then bisection of the last step; no
/// further than `reach` either side. The profile is followed as a function of a continuous
/// time, not interpolated between frames: under one frame, a residual that is quadratic
/// in time is far from linear between frames, and linear interpolation there made the
/// interval several times too narrow.
fn continuous_interval(
    f: &impl Fn(f64) -> f64,
    x0: f64,
    step: f64,
    reach: f64,
    limit: f64,
) -> (f64, f64) {
    let side = |dir: f64| -> f64 {
        let (mut inside, mut d) = (0.0, step);
        loop {
            if d >= reach {
                return reach;
            }
            if f(x0 + dir * d) > limit {
                break;
            }
            inside = d;
            d *= 2.0;
        }
        let mut outside = d;
        for _ in 0..5 {
            let m = 0.5 * (inside + outside);
            if f(x0 + dir * m) > limit {
                outside = m;
            } else {
                inside = m;
            }
        }
        0.5 * (inside + outside)
    };
    (x0 - side(-1.0), x0 + side(1.0))
}

/// Time of the peak rate: the vertex of a least-squares parabola through the contiguous rate
/// samples at or above 70 % of the peak when there are five or more (many frames average the
/// noise out at high frame rates), else of the parabola through the three samples around it.
/// A spring let go from rest moves as 1 - cos, whose rate is symmetric about its peak.
fn peak_rate_time(rate: &[f64], mid: &[f64], s: f64, i_max: usize) -> f64 {
    let peak = s * rate[i_max];
    let (mut a, mut b) = (i_max, i_max);
    while a > 0 && s * rate[a - 1] >= 0.7 * peak {
        a -= 1;
    }
    while b + 1 < rate.len() && s * rate[b + 1] >= 0.7 * peak {
        b += 1;
    }
    if b - a + 1 >= 5 {
        let t0 = mid[i_max];
        let mut m = [[0.0; 3]; 3];
        let mut v = [0.0; 3];
        for i in a..=b {
            let u = mid[i] - t0;
            let basis = [1.0, u, u * u];
            for p in 0..3 {
                v[p] += basis[p] * s * rate[i];
                for q in 0..3 {
                    m[p][q] += basis[p] * basis[q];
                }
            }
        }
        if let Some(c) = super::solve_linear(m, v) {
            let vertex = t0 - c[1] / (2.0 * c[2]);
            if c[2] < 0.0 && vertex >= mid[a] && vertex <= mid[b] {
                return vertex;
            }
        }
    }
    let signed: Vec<f64> = rate.iter().map(|r| s * r).collect();
    super::refine_extremum(mid, &signed, i_max).0
}

/// Minimum of `f` on [lo, hi] by golden-section search (24 steps: the bracket, two frames at
/// most, shrinks by 0.618^24, about 1e-5 of its width; 40 steps gave the same `validate`
/// figures to every printed digit).
fn golden_min(lo: f64, hi: f64, f: impl Fn(f64) -> f64) -> f64 {
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (lo, hi);
    if b <= a {
        return a;
    }
    let mut c = b - g * (b - a);
    let mut d = a + g * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..24 {
        if fc <= fd {
            b = d;
            d = c;
            fd = fc;
            c = b - g * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + g * (b - a);
            fd = f(d);
        }
    }
    0.5 * (a + b)
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

/// End of an overdamped fast phase: the release fit ([`spring_onset`]) run backwards in time.
/// Seen backwards, a motion that comes to rest is a flat stretch (the rest after it) joined by
/// a spring's start whose speed peaks at the peak rate, so the joint of that fit is where the
/// motion stops, with its likelihood interval. The fit takes the frames from the peak rate to
/// three times as far past the rate's fall through its crossing level (at least 12). `None`
/// with fewer than three frames between the peak rate and the crossing, or a joint outside
/// them and the rest frames. Returns the end and its standard uncertainty, seconds.
fn overdamped_end(t: &[f64], y: &[f64], t_mid_s: f64, crossing_s: f64) -> Option<(f64, f64)> {
    let n = t.len();
    let first = t.partition_point(|v| *v < t_mid_s).saturating_sub(1);
    let cross = t.partition_point(|v| *v < crossing_s).min(n);
    let phase = cross.checked_sub(first)?;
    if phase < 3 {
        return None;
    }
    let last = (cross + (3 * phase).max(12)).min(n);
    if last < cross + 6 {
        return None;
    }
    let back_t: Vec<f64> = t[first..last].iter().rev().map(|v| -v).collect();
    let back_y: Vec<f64> = y[first..last].iter().rev().copied().collect();
    let (joint, sd) = spring_onset(&back_t, &back_y, 0, back_t.len(), -t_mid_s, COARSE_JOINTS)?;
    let end_s = -joint;
    (end_s > t_mid_s && end_s < t[last - 3]).then_some((end_s, sd))
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
    // Smallest window over which the largest change is clearly more than noise: eight noise
    // standard deviations clear of the largest that noise alone reaches over the series
    // (about sqrt(2 ln n) of them). Over tens of thousands of frames a noise spike in the rate
    // can otherwise outgrow a release spread over hundreds of frames. Windows run to 1024
    // frames: a 6 ms release at 100k fps moves less than that clearance in 64.
    let diff_sigma = (noise_sigma * std::f64::consts::SQRT_2).max(f64::MIN_POSITIVE);
    let clear_sigma = MIN_WINDOW_SIGMA + (2.0 * (n as f64).ln()).sqrt();
    let w = (0..11)
        .map(|p| 1usize << p)
        .take_while(|w| *w <= n / 8)
        .find(|&w| {
            let biggest = (0..n - w).fold(0.0f64, |m, i| m.max((y[i + w] - y[i]).abs()));
            biggest >= clear_sigma * diff_sigma
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
    let quantisation_sd = period_s / 12f64.sqrt();
    let pre_release_index = j.saturating_sub(1).min(n - 1);
    let start_value = y[pre_release_index];

    // The hysteresis must outgrow the range that noise alone spans over the frames after the
    // peak rate (about 2 sqrt(2 ln n) standard deviations): at 100k fps an overdamped release
    // is followed by tens of thousands of flat frames, and a fixed 8 sd was crossed by noise,
    // which made a late "overshoot" out of it and lost the release.
    let after = (n - i_max).max(2) as f64;
    let delta_floor = 8.0f64.max(2.0 * (2.0 * after.ln()).sqrt() + 1.0) * noise_sigma;
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
    let t_mid = peak_rate_time(&rate, &mid, s, i_max);
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
        let crossing_s = if k + 1 < rate.len() {
            let (r0, r1) = (s * rate[k], s * rate[k + 1]);
            let f = ((r0 - level) / (r0 - r1)).clamp(0.0, 1.0);
            mid[k] + f * (mid[k + 1] - mid[k])
        } else {
            mid[k]
        };
        // A phase whose fall from the peak rate alone outlasts the longest release is no
        // release (a failed trigger relaxing, say): it is thrown out below as too slow, and the
        // fit over its hundreds of frames would cost milliseconds.
        let too_slow = crossing_s - t_mid > config.max_release_ms * 1e-3;
        let fitted = if too_slow {
            None
        } else {
            overdamped_end(t, y, t_mid, crossing_s)
        };
        let end_s = match fitted {
            Some((end_s, sd_s)) => {
                motion_peak_sd_s = sd_s.max(0.05 * period_s);
                end_s
            }
            None => crossing_s,
        };
        let idx = t.partition_point(|v| *v < end_s).min(n - 1);
        (end_s, y[idx], idx)
    };
    // Every release candidate below lies at or before the peak rate, so a motion peak this
    // far after it is too slow whatever the release: stop before the fit, whose window would
    // span the hundreds of frames of a failed trigger's relaxation.
    if motion_peak_s - mid[i_max] > config.max_release_ms * 1e-3 {
        return None;
    }
    // The window reaches 3 rising edges (at least 12 frames) before the edge's end, and
    // at least 2.5 times the peak-rate-to-motion-peak time before the peak rate: the rate's
    // 10 % crossing that bounds the edge is noisy at high frame rates, where it can fall long
    // after the release.
    let edge = e.saturating_sub(j);
    let reach_s = t_mid - 2.5 * (motion_peak_s - t_mid).max(0.0);
    let fit_start = (e + w)
        .saturating_sub((3 * edge).max(12))
        .min(t.partition_point(|v| *v < reach_s));
    // With three or more frames on the rising edge the fit ends at the peak rate (the
    // inflection), where a real spring's motion still follows 1 - cos closely; with fewer it
    // needs the frames up to the motion peak to have enough on the curve.
    let fit_end = if e >= j + 3 {
        i_max + w / 2 + 1
    } else {
        motion_peak_index + 1
    };
    // A fit that ends on the first frames of its window found no joint there.
    let fitted = spring_onset(t, y, fit_start, fit_end, t_mid, COARSE_JOINTS)
        .filter(|(r, _)| *r > t[(fit_start + 2).min(n - 1)] && *r <= mid[e]);
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
    fn continuous_interval_finds_where_a_parabola_crosses_its_limit() {
        // (x - 1)^2 <= 0.25 on [0.5, 1.5]; a reach of 0.3 stops the walk at 0.7 and 1.3.
        let f = |x: f64| (x - 1.0) * (x - 1.0);
        let (lo, hi) = continuous_interval(&f, 1.0, 0.01, 10.0, 0.25);
        assert!(
            (lo - 0.5).abs() < 0.01 && (hi - 1.5).abs() < 0.01,
            "{lo} {hi}"
        );
        let (lo, hi) = continuous_interval(&f, 1.0, 0.01, 0.3, 0.25);
        assert!(
            (lo - 0.7).abs() < 1e-12 && (hi - 1.3).abs() < 1e-12,
            "{lo} {hi}"
        );
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

    /// Frames of a release of shape `rise` (0 at rest to 1 at the peak, over `dur` seconds)
    /// from 100 to 160 at `tr`, then a damped swing back that leaves the peak level.
    fn shaped(fps: f64, tr: f64, dur: f64, rise: impl Fn(f64) -> f64) -> (Vec<f64>, Vec<f64>) {
        let t: Vec<f64> = (0..(0.3 * fps) as usize).map(|k| k as f64 / fps).collect();
        let y = t
            .iter()
            .map(|&t| {
                if t < tr {
                    100.0
                } else if t < tr + dur {
                    100.0 + 60.0 * rise((t - tr) / dur)
                } else {
                    let h = t - tr - dur;
                    let swing = 1.0 - (2.0 * std::f64::consts::PI * 80.0 * h).cos();
                    160.0 - 10.0 * swing * (-20.0 * h).exp()
                }
            })
            .collect();
        (t, y)
    }

    #[test]
    fn releases_of_other_shapes_than_one_minus_cosine_are_timed_within_a_third_of_a_frame() {
        // A smoothstep rise (acceleration falling linearly through zero) and a damped spring
        // (damping ratio 0.3) let go from rest: neither is the undamped 1 - cos shape, and the
        // fit chooses among damping ratios 0-0.6. Noise-free, 20 release phases each; the
        // errors measured were at most 0.27 frame.
        let z: f64 = 0.3;
        let root = (1.0 - z * z).sqrt();
        let damped = move |u: f64| {
            let x = std::f64::consts::PI * u;
            let v = 1.0 - (-z / root * x).exp() * (x.cos() + z / root * x.sin());
            v / (1.0 + (-z / root * std::f64::consts::PI).exp())
        };
        let smoothstep = |u: f64| 3.0 * u * u - 2.0 * u * u * u;
        for fps in [1000.0, 4000.0] {
            for i in 0..20 {
                let tr = 0.1 + i as f64 * 0.05 / fps;
                for (name, (t, y)) in [
                    ("smoothstep", shaped(fps, tr, 0.004, smoothstep)),
                    ("damped", shaped(fps, tr, 0.004, damped)),
                ] {
                    let ev =
                        detect_release(&t, &y, 1.0 / fps, 0.01, &ReleaseConfig::default()).unwrap();
                    let err = (ev.release_s - tr) * fps;
                    assert!(err.abs() < 1.0 / 3.0, "{name} at {fps} fps: {err} frames");
                }
            }
        }
    }

    #[test]
    fn the_coarse_joint_grid_finds_the_release_the_frame_by_frame_grid_finds() {
        // A 4 ms fast phase at 100k fps gives 400 joints in a window from 2 ms before the
        // release to the peak rate; tried first on `COARSE_JOINTS` of them, then frame by
        // frame within two coarse steps of the best, the fit must agree with trying every
        // one. Smoothstep and 1 - cos rises, 5 phases each, with and without noise (sd 0.5
        // on a jump of 60).
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let smoothstep = |u: f64| 3.0 * u * u - 2.0 * u * u * u;
        let one_minus_cos = |u: f64| 0.5 * (1.0 - (std::f64::consts::PI * u).cos());
        let fps = 100_000.0;
        let noise = Normal::new(0.0, 0.5).unwrap();
        for i in 0..5 {
            let tr = 0.1 + i as f64 * 0.2 / fps;
            for (name, (t, y)) in [
                ("smoothstep", shaped(fps, tr, 0.004, smoothstep)),
                ("1 - cos", shaped(fps, tr, 0.004, one_minus_cos)),
            ] {
                let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(i);
                let noisy: Vec<f64> = y.iter().map(|v| v + noise.sample(&mut rng)).collect();
                let start = ((tr - 2e-3) * fps) as usize;
                let t_mid = tr + 2e-3;
                let end = (t_mid * fps) as usize + 1;
                for (label, y) in [("clean", &y), ("noisy", &noisy)] {
                    let every = spring_onset(&t, y, start, end, t_mid, usize::MAX).unwrap();
                    let coarse = spring_onset(&t, y, start, end, t_mid, COARSE_JOINTS).unwrap();
                    assert!(
                        (every.0 - coarse.0).abs() < 1e-9 && (every.1 - coarse.1).abs() < 1e-9,
                        "{name} {label}, phase {i}: {every:?} {coarse:?}"
                    );
                }
            }
        }
    }

    #[test]
    fn a_slow_overdamped_release_at_100k_fps_is_found_among_flat_noisy_frames() {
        // 0.4 s at 100k fps, a 5.8 ms release of 40 units in noise of 0.5, then 17 ms short of
        // 0.2 s of flat frames. With a window capped at 64 frames no change cleared the noise
        // (no release); with a fixed 8 sd hysteresis the flat tail's noise made a late
        // "overshoot" and the release was lost as too slow.
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let fps = 100_000.0;
        let (tr, dur) = (0.2, 5.8e-3);
        let noise = Normal::new(0.0, 0.5).unwrap();
        let t: Vec<f64> = (0..40_000).map(|k| k as f64 / fps).collect();
        for seed in 0..8 {
            let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
            let y: Vec<f64> = t
                .iter()
                .map(|&t| {
                    let u = ((t - tr) / dur).clamp(0.0, 1.0);
                    let rise = 20.0 * (1.0 - (std::f64::consts::PI * u).cos());
                    100.0 + rise + noise.sample(&mut rng)
                })
                .collect();
            let sigma = frame_noise_sigma(&y);
            let config = ReleaseConfig::default();
            let ev = detect_release(&t, &y, 1.0 / fps, sigma, &config)
                .unwrap_or_else(|| panic!("seed {seed}: no release"));
            assert!(!ev.overshoot, "seed {seed}");
            // Release within 10 frames (0.1 ms). The end of the phase, fitted backwards in
            // time, within 12 frames and 2.5 of its standard uncertainties (measured: -7.4 to
            // +2.2 frames, sd 3.1-4.0). The rate's fall through 10 % of its peak, the end used
            // before, was up to 27 frames early with an sd of 0.29 frame claimed.
            let release_err = (ev.release_s - tr) * fps;
            let end_err = (ev.motion_peak_s - (tr + dur)) * fps;
            let end_sd = ev.motion_peak_sd_s * fps;
            assert!(
                release_err.abs() <= 10.0,
                "seed {seed}: release {release_err} frames"
            );
            assert!(
                end_err.abs() <= 12.0 && end_err.abs() <= 2.5 * end_sd,
                "seed {seed}: end {end_err} frames, sd {end_sd}"
            );
        }
    }

    #[test]
    fn a_noise_free_overdamped_end_is_timed_within_a_tenth_of_a_frame() {
        // A 4 ms 1 - cos rise to a flat rest at 4000 fps, 20 phases of the end against the
        // frames. The rate's fall through 10 % of its peak comes 3.2 % of the phase (0.5
        // frame) early; the backward fit should find the stop itself.
        let fps = 4000.0;
        for i in 0..20 {
            let (tr, dur) = (0.1 + i as f64 * 0.05 / fps, 4e-3);
            let t: Vec<f64> = (0..(0.3 * fps) as usize).map(|k| k as f64 / fps).collect();
            let y: Vec<f64> = t
                .iter()
                .map(|&t| {
                    let u = ((t - tr) / dur).clamp(0.0, 1.0);
                    100.0 + 30.0 * (1.0 - (std::f64::consts::PI * u).cos())
                })
                .collect();
            let ev = detect_release(&t, &y, 1.0 / fps, 0.01, &ReleaseConfig::default()).unwrap();
            assert!(!ev.overshoot);
            let err = (ev.motion_peak_s - (tr + dur)) * fps;
            assert!(err.abs() < 0.1, "phase {i}: end {err} frames");
        }
    }

    #[test]
    fn release_shape_is_one_minus_cosine_undamped_and_peaks_its_speed_at_h_mid() {
        let h_mid = 0.002;
        for h in [0.0005, 0.001, 0.003] {
            let want = 1.0 - (std::f64::consts::PI * h / (2.0 * h_mid)).cos();
            assert!((release_shape(h, h_mid, 0.0) - want).abs() < 1e-12);
        }
        for zeta in [0.2, 0.4, 0.6] {
            let speed = |h: f64| {
                (release_shape(h + 1e-7, h_mid, zeta) - release_shape(h - 1e-7, h_mid, zeta)) / 2e-7
            };
            assert!(speed(h_mid) > speed(0.9 * h_mid) && speed(h_mid) > speed(1.1 * h_mid));
        }
    }
}
