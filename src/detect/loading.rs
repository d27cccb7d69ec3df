//! Loading onset in two steps.
//!
//! 1. Two-phase (hinge) regression: the measure is flat, then drifts, y = a + b h + c h^2 with
//!    h = max(0, t - tau), or the straight hinge (c = 0) when the curvature does not reduce the
//!    residual beyond noise (nested F test). For every candidate tau on the frame clock the
//!    least-squares fit comes from running power sums in O(1), so the whole search is one
//!    pass. The drift must be significant against a flat segment (F statistic), else there is
//!    no loading onset.
//! 2. Profile likelihood around the hinge onset (Venzon & Moolgavkar 1988 for profile
//!    intervals): y = a + b h^p with the exponent p in [1, 2] profiled out, because how gently
//!    a muscle or motor starts to load is unknown and a gentle start hides in noise. The
//!    reported onset is the best tau; the 95 % interval is the set of tau whose residual stays
//!    under the profile-t limit ([`super::profile_limit`]), which is the chi-square(1) = 3.84
//!    likelihood-ratio limit with many frames and wider with few.

use serde::{Deserialize, Serialize};

/// F statistic the hinge must reach over a flat line. Default 30: well above the F(3, n) 99.9 %
/// point, because the best of many candidate onsets is being tested.
pub const MIN_F: f64 = 30.0;

/// A loading onset and its uncertainty.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoadingOnset {
    /// Loading onset, video clock, seconds.
    pub onset_s: f64,
    /// Half-width of the 95 % likelihood interval, ms: the larger of its two sides (at least
    /// half a frame period).
    pub uncertainty_ms: f64,
    /// Ends of the 95 % likelihood interval, video clock, seconds (each at least half a frame
    /// period from the onset). A gentle start leaves the early side the longer.
    pub early_s: f64,
    pub late_s: f64,
    /// Drift rate shortly after the onset (a tenth of the way to the release), units per second.
    pub drift_per_s: f64,
    /// F statistic of the hinge against a flat line.
    pub f_statistic: f64,
    /// The drift fits best with an onset before the first frame: the record began while
    /// loading was under way and does not show the held level, so the onset is not known.
    pub before_record: bool,
    /// The 95 % interval reaches before the first frame: the loading may have begun before
    /// the record (true whenever `before_record` is).
    pub may_precede_record: bool,
    /// Where the loading becomes visible: see [`departure_s`]. Video clock, seconds.
    pub departure_s: Option<f64>,
}

/// Finds the loading onset in the frames `..end` of (t, y).
pub fn detect_loading(t: &[f64], y: &[f64], end: usize, period_s: f64) -> Option<LoadingOnset> {
    let m = end.min(y.len()).min(t.len());
    if m < 8 {
        return None;
    }
    let t0 = t[0];
    let mean_y = y[..m].iter().sum::<f64>() / m as f64;
    let tt: Vec<f64> = t[..m].iter().map(|v| v - t0).collect();
    let yy: Vec<f64> = y[..m].iter().map(|v| v - mean_y).collect();
    let hinge = hinge(&tt, &yy)?;
    // The hinge finds the onset in one pass; the power-law profile around it then says how
    // gently the drift may have started, and widens the interval on that side.
    let (onset, early, late) = match power_profile(&tt, &yy, hinge.onset) {
        Some(p) => (p.onset, p.early, p.late),
        None => (
            hinge.onset,
            hinge.onset - hinge.half_width,
            hinge.onset + hinge.half_width,
        ),
    };
    let early = early.min(onset - 0.5 * period_s);
    let late = late.max(onset + 0.5 * period_s);
    Some(LoadingOnset {
        before_record: onset < 0.0,
        may_precede_record: early < 0.0,
        onset_s: onset + t0,
        uncertainty_ms: (onset - early).max(late - onset) * 1e3,
        early_s: early + t0,
        late_s: late + t0,
        drift_per_s: hinge.drift_per_s,
        f_statistic: hinge.f_statistic,
        departure_s: None,
    })
}

/// Frames per block of [`departure_s`]: the mean of 16 frames has a quarter of the per-frame
/// noise.
const DEPARTURE_FRAMES: usize = 16;

/// Per-frame noise standard deviations from the held level at which the loading is visible.
/// Common practice for movement and muscle-activity onsets is a threshold of the baseline mean
/// plus two or three baseline SD (reviewed by Hodges & Bui 1996, from memory).
pub const DEPARTURE_SIGMA: f64 = 2.0;

/// Where the loading measure visibly leaves its held level: where a fit that only moves away
/// from the held level (isotonic regression, pool-adjacent-violators, on the means of blocks
/// of [`DEPARTURE_FRAMES`] frames from `onset_s` to frame `end`) first stands
/// [`DEPARTURE_SIGMA`] per-frame noise SD (`sigma`) out in the direction of the drift; linear
/// between the centres of the fit's pooled blocks. The held level is the mean of the frames
/// before the onset. A monotone fit pools the noise where a slow drift creeps towards the
/// threshold, where the first window mean to cross it would be early by the time the drift
/// takes to rise some noise SD of the mean. `None` when fewer than [`DEPARTURE_FRAMES`] frames
/// precede the onset or the drift never stands that far out.
pub fn departure_s(t: &[f64], y: &[f64], onset_s: f64, end: usize, sigma: f64) -> Option<f64> {
    MonotoneDrift::new(t, y, onset_s, end)?.crossing_s(DEPARTURE_SIGMA * sigma)
}

/// Widens the onset's interval by the time the drift takes to rise two SD of the slow wander
/// of the measure (a tracked point that wanders, a drifting lamp) on each side: a wander
/// moves the measure as a drift does, and no fit tells the two apart until the drift has
/// risen above it. The wander's SD is that of the block means (of [`DEPARTURE_FRAMES`]
/// frames) about the held level before the onset and about the monotone fit after it, less
/// the share of white noise of per-frame SD `sigma`; zero unless the block means scatter
/// more than white noise would at the 1 % level.
pub fn widen_for_wander(t: &[f64], y: &[f64], found: &mut LoadingOnset, end: usize, sigma: f64) {
    if let Some(drift) = MonotoneDrift::new(t, y, found.onset_s, end) {
        widen(&drift, t, found, sigma);
    }
}

/// Sets `found.departure_s` ([`departure_s`]) and widens the interval for a wandering measure
/// ([`widen_for_wander`]) from one monotone fit of the frames after the onset.
pub fn read_departure_and_wander(
    t: &[f64],
    y: &[f64],
    found: &mut LoadingOnset,
    end: usize,
    sigma: f64,
) {
    let Some(drift) = MonotoneDrift::new(t, y, found.onset_s, end) else {
        return;
    };
    found.departure_s = drift.crossing_s(DEPARTURE_SIGMA * sigma);
    widen(&drift, t, found, sigma);
}

fn widen(drift: &MonotoneDrift, t: &[f64], found: &mut LoadingOnset, sigma: f64) {
    let wander_sd = drift.wander_sd(sigma);
    let Some(rise_s) = drift.crossing_s(2.0 * wander_sd) else {
        return;
    };
    let reach_s = rise_s - found.onset_s;
    found.early_s = found.early_s.min(found.onset_s - reach_s);
    found.late_s = found.late_s.max(found.onset_s + reach_s);
    found.uncertainty_ms = found.uncertainty_ms.max(reach_s * 1e3);
    found.may_precede_record |= t.first().is_some_and(|&t0| found.early_s < t0);
}

/// The measure from the onset on as block means about the held level, and the fit to them
/// that only moves away from it (in the direction of the drift at the end).
struct MonotoneDrift {
    /// Block means before the onset, less the held level.
    held: Vec<f64>,
    /// (centre time, mean less the held level, signed so the drift rises) after the onset.
    blocks: Vec<(f64, f64)>,
    /// The monotone fit: runs of (value, first block, blocks).
    pooled: Vec<(f64, usize, usize)>,
}

impl MonotoneDrift {
    fn new(t: &[f64], y: &[f64], onset_s: f64, end: usize) -> Option<Self> {
        let w = DEPARTURE_FRAMES;
        let m = end.min(y.len()).min(t.len());
        let first = t[..m].partition_point(|&v| v < onset_s);
        if first < w || m < first + 2 * w {
            return None;
        }
        let level = y[..first].iter().sum::<f64>() / first as f64;
        let mean = |k: usize| y[k..k + w].iter().sum::<f64>() / w as f64 - level;
        let mut blocks: Vec<(f64, f64)> = (first..m - w + 1)
            .step_by(w)
            .map(|k| (t[k..k + w].iter().sum::<f64>() / w as f64, mean(k)))
            .collect();
        let sign = blocks.last().map_or(0.0, |b| b.1.signum());
        blocks.iter_mut().for_each(|b| b.1 *= sign);
        let pooled = pool_adjacent(blocks.iter().map(|b| b.1));
        let held = (first % w..first - w + 1).step_by(w).map(mean).collect();
        Some(Self {
            held,
            blocks,
            pooled,
        })
    }

    /// Where the fit first stands `limit` above the held level: linear between the centres
    /// of its pooled runs.
    fn crossing_s(&self, limit: f64) -> Option<f64> {
        let centre = |(_, from, n): (f64, usize, usize)| {
            self.blocks[from..from + n].iter().map(|b| b.0).sum::<f64>() / n as f64
        };
        let k = self.pooled.iter().position(|r| r.0 >= limit)?;
        let (above, t_above) = (self.pooled[k].0, centre(self.pooled[k]));
        let Some(&prev) = k.checked_sub(1).and_then(|j| self.pooled.get(j)) else {
            return self.blocks.first().map(|b| b.0);
        };
        let f = (limit - prev.0) / (above - prev.0);
        Some(centre(prev) + f * (t_above - centre(prev)))
    }

    /// SD of the slow wander: see [`widen_for_wander`].
    fn wander_sd(&self, sigma: f64) -> f64 {
        let after = self
            .pooled
            .iter()
            .flat_map(|&(v, from, n)| self.blocks[from..from + n].iter().map(move |b| b.1 - v));
        let (sum, count) = self
            .held
            .iter()
            .copied()
            .chain(after)
            .fold((0.0, 0usize), |(s, c), r| (s + r * r, c + 1));
        // Under white noise alone the sum over `count` blocks is white x chi-square(count); a
        // wander is taken as real only above its upper 1 % point (normal approximation).
        let white = sigma * sigma / DEPARTURE_FRAMES as f64;
        let n = count as f64;
        if count == 0 || sum <= white * (n + 2.326 * (2.0 * n).sqrt()) {
            return 0.0;
        }
        (sum / n - white).sqrt()
    }
}

/// Non-decreasing least-squares fit of equally weighted values (pool adjacent violators):
/// runs of (value, first index, length).
fn pool_adjacent(values: impl Iterator<Item = f64>) -> Vec<(f64, usize, usize)> {
    let mut runs: Vec<(f64, usize, usize)> = Vec::new();
    for (i, v) in values.enumerate() {
        let mut run = (v, i, 1);
        while let Some(&last) = runs.last() {
            if last.0 <= run.0 {
                break;
            }
            runs.pop();
            let n = last.2 + run.2;
            run = (
                (last.0 * last.2 as f64 + run.0 * run.2 as f64) / n as f64,
                last.1,
                n,
            );
        }
        runs.push(run);
    }
    runs
}

/// The hinge fit: onset and 95 % half-width in segment-relative seconds.
struct Hinge {
    onset: f64,
    half_width: f64,
    drift_per_s: f64,
    f_statistic: f64,
}

/// The straight or curved hinge with the least residual, on times `tt` from the segment start
/// and values `yy` less their mean; `None` when the drift is not significant.
fn hinge(tt: &[f64], yy: &[f64]) -> Option<Hinge> {
    let m = tt.len().min(yy.len());
    let nf = m as f64;
    let syy: f64 = yy.iter().map(|v| v * v).sum();
    // Suffix sums over i >= k of t^p (p = 0..4) and y t^p (p = 0..2).
    let mut ts = vec![[0.0f64; 5]; m + 1];
    let mut ys = vec![[0.0f64; 3]; m + 1];
    for i in (0..m).rev() {
        let t = tt[i];
        let powers = [1.0, t, t * t, t * t * t, t * t * t * t];
        for p in 0..5 {
            ts[i][p] = ts[i + 1][p] + powers[p];
        }
        for p in 0..3 {
            ys[i][p] = ys[i + 1][p] + yy[i] * powers[p];
        }
    }
    // The sum of yy is zero. For tau = tt[k], h = t - tau over i > k; binomial expansion turns
    // the power sums into sums of powers of h.
    let sse_at = |k: usize| -> Option<(f64, f64)> {
        let tau = tt[k];
        let [s0, s1, s2, s3, s4] = ts[k + 1];
        let [y0, y1, y2] = ys[k + 1];
        let h1 = s1 - tau * s0;
        let h2 = s2 - 2.0 * tau * s1 + tau * tau * s0;
        let h3 = s3 - 3.0 * tau * s2 + 3.0 * tau * tau * s1 - tau.powi(3) * s0;
        let h4 =
            s4 - 4.0 * tau * s3 + 6.0 * tau * tau * s2 - 4.0 * tau.powi(3) * s1 + tau.powi(4) * s0;
        let hy1 = y1 - tau * y0;
        let hy2 = y2 - 2.0 * tau * y1 + tau * tau * y0;
        let coef =
            super::solve_linear([[nf, h1, h2], [h1, h2, h3], [h2, h3, h4]], [0.0, hy1, hy2])?;
        let sse = syy - coef[1] * hy1 - coef[2] * hy2;
        // Drift rate one tenth of the way into the segment after tau, for reporting.
        let span = tt[m - 1] - tau;
        Some((sse.max(0.0), coef[1] + 2.0 * coef[2] * 0.1 * span))
    };
    // The straight hinge (c = 0) from the same sums, for the model-form part of the interval.
    let sse_linear = |k: usize| -> Option<f64> {
        let tau = tt[k];
        let [s0, s1, s2, _, _] = ts[k + 1];
        let [y0, y1, _] = ys[k + 1];
        let h1 = s1 - tau * s0;
        let h2 = s2 - 2.0 * tau * s1 + tau * tau * s0;
        let hy1 = y1 - tau * y0;
        let den = nf * h2 - h1 * h1;
        (den > 0.0).then(|| syy - nf * hy1 / den * hy1)
    };
    let sse: Vec<Option<(f64, f64)>> = (0..m)
        .map(|k| if k + 3 < m { sse_at(k) } else { None })
        .collect();
    let (k_best, (sse_min, drift)) = sse
        .iter()
        .enumerate()
        .filter_map(|(k, v)| v.map(|v| (k, v)))
        .min_by(|a, b| a.1 .0.total_cmp(&b.1 .0))?;
    let f_statistic = ((syy - sse_min) / 3.0) / (sse_min.max(1e-300) / (nf - 4.0));
    if f_statistic < MIN_F {
        return None;
    }
    // Best tau of a profile, refined between frames by a parabola through its neighbours.
    let refine = |profile: &[Option<f64>], k: usize| -> f64 {
        match (
            profile.get(k.wrapping_sub(1)).copied().flatten(),
            profile.get(k + 1).copied().flatten(),
        ) {
            (Some(a), Some(c)) => match super::parabola_vertex(
                (tt[k - 1], a),
                (tt[k], profile[k].unwrap_or(a)),
                (tt[k + 1], c),
            ) {
                Some((tv, _)) if tv >= tt[k - 1] && tv <= tt[k + 1] => tv,
                _ => tt[k],
            },
            _ => tt[k],
        }
    };
    let curved: Vec<Option<f64>> = sse.iter().map(|v| v.map(|v| v.0)).collect();
    let straight: Vec<Option<f64>> = (0..m)
        .map(|k| if k + 3 < m { sse_linear(k) } else { None })
        .collect();
    let (k_line, sse_line) = straight
        .iter()
        .enumerate()
        .filter_map(|(k, v)| v.map(|v| (k, v)))
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .unwrap_or((k_best, sse_min));
    let onset_curved = refine(&curved, k_best);
    let onset_straight = refine(&straight, k_line);
    // Nested models: keep the straight hinge unless the curvature term reduces the residual
    // by more than its own noise share (F(1, n) above 1, a lenient test, because a curved
    // start read as straight comes late while a straight one read as curved comes early).
    let curvature_f = (sse_line - sse_min) / (sse_min.max(1e-300) / (nf - 4.0));
    // Parameters: level, drift, onset, and the curvature when it is kept.
    let (onset, profile, k_chosen, sse_chosen, params) = if curvature_f > 1.0 {
        (onset_curved, &curved, k_best, sse_min, 4)
    } else {
        (onset_straight, &straight, k_line, sse_line, 3)
    };
    // The interval's ends are interpolated between frames, where the profile crosses the limit.
    let limit = super::profile_limit(sse_chosen, tt.len(), params);
    let statistical_s = super::profile_half_width(tt, profile, k_chosen, limit);
    // Where the straight and the curved start disagree, neither is known to be the true
    // shape: their difference joins the interval in quadrature (model-form uncertainty).
    Some(Hinge {
        onset,
        half_width: statistical_s.hypot(1.96 * (onset_straight - onset_curved).abs()),
        drift_per_s: drift,
        f_statistic,
    })
}

/// The exponent p of the start y = a + b h^p runs from 1 (a straight start) to `P_MAX` (a drive
/// whose speed itself ramps up smoothly: a raised-cosine speed ramp starts as h^3) in steps of
/// 1/`COARSE_DEN`, each step h^(1/DEN) a run of square roots. A coarser grid leaves a misfit
/// that grows with the number of frames and makes the interval overconfident (a quarter step
/// covered 45 % of true onsets at 4000 fps in a simulation; sixteenths between 1 and 2 with
/// the least residual interpolated between steps covered 95 %).
const P_MAX: usize = 4;
/// The plain start: a power law with the exponent from 1 to 2 and no ramp. Its onset is the
/// reported one unless the wide family fits clearly better (see [`power_profile`]).
const PLAIN: Shapes = Shapes {
    p_max: 2,
    ramps: false,
};
/// The wide start: exponents up to `P_MAX` and a ramp that may end; its interval always joins
/// the reported one, because a gentle start hides in noise.
const WIDE: Shapes = Shapes {
    p_max: P_MAX,
    ramps: true,
};
/// (Eighths for the wide starts halved their cost with the same coverage on independent
/// trials, but moved enough onsets to raise the loading_ms median at 2000 fps from 4.7 to
/// 5.1 %.)
const COARSE_DEN: usize = 16;
/// Above this many frames in the fit the exponent is taken in steps of 1/`FINE_DEN`. On exact
/// power-law starts in noise, sixteenths covered 92 % of true onsets at 20000 fps and 80 % at
/// 100k fps (some 30,000 frames); 64ths covered 95 % and 97 %.
const FINE_POWER_FRAMES: usize = 2000;
const FINE_DEN: usize = 64;
/// A drive ramps its speed up and then runs on at constant speed: the start is h^p only up to
/// the end of the ramp, after which the model goes on straight with the slope it reached. The
/// ramp may end after the whole fitted span (a pure power law) or after span / 2^(k/2) for k
/// up to twice this many halvings; the ramp length is profiled out like the exponent.
const RAMP_HALVINGS: usize = 5;
/// Share of the loading, from the hinge onset to the end of the segment, that the power-law
/// fit uses. The last quarter is left out: latches often creep just before they let go, and
/// that late upturn would pull the exponent up and the onset early.
const POWER_FIT_SHARE: f64 = 0.75;
/// Frames are averaged into at most this many bins for the power-law profile (at 4000 fps a
/// bin of a 0.4 s segment is about 2 ms, under the onset intervals seen there).
const MAX_BINS: usize = 160;

/// Candidates the onset profile tries first: every this many (see [`Bins::profile`]).
const SPARSE_STRIDE: usize = 4;

/// Which starts a profile fits over.
#[derive(Clone, Copy)]
struct Shapes {
    p_max: usize,
    ramps: bool,
}

impl Shapes {
    /// Parameters of a fit: level, scale, onset, exponent, and the ramp's end when it may end.
    fn params(self) -> usize {
        if self.ramps {
            5
        } else {
            4
        }
    }
}

/// Onset and 95 % likelihood interval from the power-law profile, segment-relative seconds.
struct PowerOnset {
    onset: f64,
    early: f64,
    late: f64,
}

/// The exponent that marks the cycloidal ramp in a [`StartFit`].
const CYCLOIDAL: f64 = 0.0;

/// The best fit of a profile: onset, exponent (or [`CYCLOIDAL`]), ramp length (infinite for
/// none), level, scale.
#[derive(Clone, Copy)]
struct StartFit {
    tau: f64,
    p: f64,
    ramp: f64,
    level: f64,
    scale: f64,
}

impl StartFit {
    fn at(&self, t: f64) -> f64 {
        self.level + self.scale * ramped_power(t - self.tau, self.p, self.ramp)
    }
}

/// The cycloidal ramp (a standard motion profile: the speed rises as a raised cosine over the
/// ramp, then stays): position (u - sin(pi u) / pi) ramp / 2 for u = h / ramp < 1, then
/// ramp / 2 + (h - ramp). It starts as h^3 and joins its straight run with no kink, where the
/// power law held to the ramp's end turns at once.
fn cycloidal(h: f64, ramp: f64) -> f64 {
    use std::f64::consts::PI;
    if h <= 0.0 {
        0.0
    } else if h < ramp {
        let u = h / ramp;
        0.5 * ramp * (u - sin_pi(u) / PI)
    } else {
        0.5 * ramp + (h - ramp)
    }
}

/// sin(pi u) for u in [0, 1], by its Taylor series on [0, 1/2] (reflected about 1/2) up to the
/// x^21 term; the first term left out is under 2e-18 there. The cycloid's rise needs it at
/// every bin for every candidate onset and ramp, where the library sine took about a fifth of
/// the video detection's time.
fn sin_pi(u: f64) -> f64 {
    // 1 / ((2k) (2k + 1)) for k = 1..10: each Taylor term over the one before, less x^2.
    const RATIOS: [f64; 10] = [
        1.0 / 6.0,
        1.0 / 20.0,
        1.0 / 42.0,
        1.0 / 72.0,
        1.0 / 110.0,
        1.0 / 156.0,
        1.0 / 210.0,
        1.0 / 272.0,
        1.0 / 342.0,
        1.0 / 420.0,
    ];
    let x = std::f64::consts::PI * u.min(1.0 - u);
    let x2 = x * x;
    x * RATIOS.iter().rev().fold(1.0, |s, r| 1.0 - x2 * r * s)
}

/// h^p up to the ramp's end, then straight on with the slope reached there; 0 before h = 0.
fn ramped_power(h: f64, p: f64, ramp: f64) -> f64 {
    if p == CYCLOIDAL {
        cycloidal(h, ramp)
    } else if h <= 0.0 {
        0.0
    } else if h <= ramp {
        h.powf(p)
    } else {
        ramp.powf(p) + p * ramp.powf(p - 1.0) * (h - ramp)
    }
}

/// Frames averaged in runs: times, values, weights (frame counts), and the scatter of the
/// values inside the runs, which every fit's residual sum of squares carries as a constant.
struct Bins {
    t: Vec<f64>,
    y: Vec<f64>,
    w: Vec<f64>,
    within: f64,
    /// Sums over all bins of w, w y and w y^2, the same for every candidate onset.
    sums: [f64; 3],
}

/// A candidate onset's least residual and the fit that reaches it.
type Candidate = Option<(f64, StartFit)>;

impl Bins {
    /// Runs of `coarse` frames, or of `fine` frames for those whose time lies in `fine_span`.
    fn new(tt: &[f64], yy: &[f64], coarse: usize, fine: usize, fine_span: (f64, f64)) -> Bins {
        let mut bins = Bins {
            t: Vec::new(),
            y: Vec::new(),
            w: Vec::new(),
            within: 0.0,
            sums: [0.0; 3],
        };
        let mut start = 0;
        while start < tt.len() {
            let in_fine = tt[start] >= fine_span.0 && tt[start] <= fine_span.1;
            let end = (start + if in_fine { fine } else { coarse }.max(1)).min(tt.len());
            let w = (end - start) as f64;
            let mt = tt[start..end].iter().sum::<f64>() / w;
            let my = yy[start..end].iter().sum::<f64>() / w;
            bins.within += yy[start..end].iter().map(|v| (v - my).powi(2)).sum::<f64>();
            bins.t.push(mt);
            bins.y.push(my);
            bins.w.push(w);
            start = end;
        }
        let (by, bw) = (&bins.y, &bins.w);
        bins.sums = [
            bw.iter().sum(),
            bw.iter().zip(by).map(|(w, y)| w * y).sum(),
            bw.iter().zip(by).map(|(w, y)| w * y * y).sum(),
        ];
        bins
    }

    /// Candidate onsets: the bin times in `range`, and, when `range` reaches before the first
    /// bin, times before it at the first bins' spacing (a loading already under way when the
    /// record began fits best with an onset before it).
    fn candidates(&self, range: (f64, f64)) -> Vec<f64> {
        let bt = &self.t;
        let mut c: Vec<f64> = Vec::new();
        if bt.len() >= 2 && range.0 < bt[0] {
            let step = bt[1] - bt[0];
            let before = (((bt[0] - range.0) / step).ceil() as usize).min(MAX_BINS / 2);
            c.extend((1..=before).rev().map(|i| bt[0] - i as f64 * step));
        }
        c.extend(bt.iter().copied().filter(|&t| t >= range.0 && t <= range.1));
        c
    }

    /// Least residual sum of squares (whole frames, not bins) over exponent and ramp length for
    /// each candidate onset, with the fit that reaches it, where the interval needs it: at
    /// every [`SPARSE_STRIDE`]-th candidate first, then at every candidate within a stride of
    /// one whose residual is under the limit `fit` sets plus twice the limit's height over the
    /// least, until none is added. Candidates far above the limit stay `None`: they neither
    /// hold the least nor bound the interval.
    fn profile(
        &self,
        candidates: &[f64],
        frames: usize,
        shapes: Shapes,
        fit: impl Fn(&[Candidate]) -> Option<ProfileFit>,
    ) -> Vec<Candidate> {
        // Over tens of thousands of frames the residual rises so steeply with the exponent
        // that coarse steps leave an interpolation misfit larger than the interval's own limit.
        let den = if frames > FINE_POWER_FRAMES {
            FINE_DEN
        } else {
            COARSE_DEN
        };
        let t_end = self.t.last().copied().unwrap_or(0.0);
        let n = candidates.len();
        let mut profile: Vec<Candidate> = vec![None; n];
        let mut done = vec![false; n];
        let mut scratch = StartScratch::default();
        let mut todo: Vec<usize> = (0..n).step_by(SPARSE_STRIDE).collect();
        todo.extend(n.checked_sub(1));
        while !todo.is_empty() {
            for &k in &todo {
                if !done[k] {
                    let tau = candidates[k];
                    profile[k] = self.best_start(tau, t_end - tau, den, shapes, &mut scratch);
                    done[k] = true;
                }
            }
            let Some(f) = fit(&profile) else {
                todo = (0..n).filter(|&k| !done[k]).collect();
                continue;
            };
            let reach = f.limit + 2.0 * (f.limit - f.sse_min);
            todo = (0..n)
                .filter(|&k| profile[k].is_some_and(|c| c.0 <= reach))
                .flat_map(|k| k.saturating_sub(SPARSE_STRIDE)..(k + SPARSE_STRIDE + 1).min(n))
                .filter(|&j| !done[j])
                .collect();
        }
        profile
    }

    /// The least-squares start from `tau` over the exponent grid and the ramp lengths.
    fn best_start(
        &self,
        tau: f64,
        span: f64,
        den: usize,
        shapes: Shapes,
        scratch: &mut StartScratch,
    ) -> Candidate {
        let steps = (shapes.p_max - 1) * den + 1;
        let roots_count = den.trailing_zeros() as usize;
        let (bt, by, bw) = (&self.t, &self.y, &self.w);
        let first = bt.partition_point(|&t| t <= tau);
        if span <= 0.0 || bt.len() < first + 3 {
            return None;
        }
        let [sw, sy, syy] = self.sums;
        let halvings = if shapes.ramps { 2 * RAMP_HALVINGS } else { 0 };
        let ramps: Vec<f64> = (0..=halvings)
            .map(|k| {
                if k == 0 {
                    f64::INFINITY
                } else {
                    span * 0.5f64.powf(0.5 * k as f64)
                }
            })
            .collect();
        let powers = sized(&mut scratch.powers, steps, 0.0);
        for (s, p) in powers.iter_mut().enumerate() {
            *p = 1.0 + s as f64 / den as f64;
        }
        let powers = &*powers;
        // Past a ramp's end x = ramp^p + p ramp^(p - 1) (h - ramp): the two terms per ramp and
        // exponent (unused for the ramp that never ends).
        let StartScratch {
            past,
            head,
            tail,
            acc,
            sums,
            x,
            root_powers,
            levels,
            ..
        } = scratch;
        let past = sized(past, ramps.len() * steps, (0.0, 0.0));
        let x = sized(x, steps, 0.0);
        let root_powers = sized(root_powers, den, 1.0);
        root_powers[0] = 1.0;
        for (r, &ramp) in ramps.iter().enumerate().filter(|(_, r)| r.is_finite()) {
            let mut roots = [ramp; 8];
            for j in 1..=roots_count {
                roots[j] = roots[j - 1].sqrt();
            }
            fill_powers(x, root_powers, ramp, &roots[1..=roots_count]);
            for (s, &rp) in x.iter().enumerate() {
                past[r * steps + s] = (rp, powers[s] * rp / ramp);
            }
        }
        // Per ramp and exponent (and the cycloidal ramp, when ramps may end, as the last
        // column): sums of w x, w x^2 and w y x. Up to a ramp's end x = h^p, whose sums are
        // running sums per exponent, kept where a ramp ends; past it x = c + b h, whose sums
        // come from the tail's sums of w, w h, w h^2, w y and w y h, the same for every
        // exponent.
        let cols = steps + usize::from(shapes.ramps);
        let m = bt.len() - first;
        let ends: Vec<usize> = ramps
            .iter()
            .map(|&r| bt[first..].partition_point(|&t| t - tau <= r))
            .collect();
        let bins_after = (&bt[first..], &by[first..], &bw[first..]);
        let head = sized(head, ends.len() * steps, [0.0; 3]);
        let buffers = (&mut *sums, &mut *x, &mut *root_powers, &mut *levels);
        head_sums(bins_after, tau, den, &ends, head, buffers);
        let tail = sized(tail, m + 1, [0.0; 5]);
        tail[m] = [0.0; 5];
        for k in (0..m).rev() {
            let j = first + k;
            let (h, w, wy) = (bt[j] - tau, bw[j], bw[j] * by[j]);
            let [t0, t1, t2, u0, u1] = tail[k + 1];
            tail[k] = [t0 + w, t1 + w * h, t2 + w * h * h, u0 + wy, u1 + wy * h];
        }
        let acc = sized(acc, ramps.len() * cols, [0.0; 3]);
        for (r, &ramp) in ramps.iter().enumerate() {
            let kr = ends[r];
            let [t0, t1, t2, u0, u1] = tail[kr];
            for s in 0..steps {
                let [a0, a1, a2] = head[r * steps + s];
                acc[r * cols + s] = if kr == m {
                    [a0, a1, a2]
                } else {
                    let (a, b) = past[r * steps + s];
                    let c = a - b * ramp;
                    [
                        a0 + c * t0 + b * t1,
                        a1 + c * c * t0 + 2.0 * c * b * t1 + b * b * t2,
                        a2 + c * u0 + b * u1,
                    ]
                };
            }
            if cols > steps {
                // The cycloid's rise frame by frame, then its straight run h - ramp / 2 from
                // the tail's sums.
                let ramp = ramp.min(span);
                let kc = bt[first..].partition_point(|&t| t - tau < ramp);
                let [t0, t1, t2, u0, u1] = tail[kc];
                let c = -0.5 * ramp;
                let mut sums = [c * t0 + t1, c * c * t0 + 2.0 * c * t1 + t2, c * u0 + u1];
                for j in first..first + kc {
                    let x = cycloidal(bt[j] - tau, ramp);
                    sums[0] += bw[j] * x;
                    sums[1] += bw[j] * x * x;
                    sums[2] += bw[j] * by[j] * x;
                }
                acc[r * cols + steps] = sums;
            }
        }
        let mut best: Candidate = None;
        for (i, &[sx, sxx, syx]) in acc.iter().enumerate() {
            let det = sw * sxx - sx * sx;
            if det <= 0.0 {
                continue;
            }
            let scale = (sw * syx - sy * sx) / det;
            let level = (sy - scale * sx) / sw;
            let sse = (syy - level * sy - scale * syx).max(0.0) + self.within;
            if best.is_none_or(|b| sse < b.0) {
                let s = i % cols;
                let ramp = ramps[i / cols];
                let fit = StartFit {
                    tau,
                    p: if s == steps { CYCLOIDAL } else { powers[s] },
                    ramp: if s == steps { ramp.min(span) } else { ramp },
                    level,
                    scale,
                };
                best = Some((sse, fit));
            }
        }
        best
    }
}

/// x[s] = h^(1 + s / den) for every s, den = `root_powers.len()` (a power of two), from the
/// roots h^(1/2), h^(1/4) ... h^(1/den) in `roots`. Each power is a product of roots, so no
/// long chain of dependent multiplications runs per value.
fn fill_powers(x: &mut [f64], root_powers: &mut [f64], h: f64, roots: &[f64]) {
    let den = root_powers.len();
    // root_powers[i] = h^(i / den): the finest root fills [1], each coarser one doubles.
    let mut filled = 1;
    for &root in roots.iter().rev() {
        let (low, high) = root_powers.split_at_mut(filled);
        for (v, &p) in high.iter_mut().zip(low.iter()) {
            *v = p * root;
        }
        filled *= 2;
    }
    let mut whole = h;
    for chunk in x.chunks_mut(den) {
        for (v, &r) in chunk.iter_mut().zip(root_powers.iter()) {
            *v = whole * r;
        }
        whole *= h;
    }
}

/// Running sums of w x, w x^2 and w y x with x = h^p, h = t - `tau`, over the first `ends[r]`
/// of the bins `(t, y, w)` for each r, for the exponents p = 1 + s / `den`, s < steps, written
/// to `head` (entry r * steps + s; steps = head.len() / ends.len()). The roots h^(1/2),
/// h^(1/4) ... h^(1/den) are taken bin-wise a level at a time, and each bin's powers
/// h^(1 + q + i / den) are products of them, so no long chain of dependent operations runs
/// per bin and the sums run as plain loops over the exponents. `buffers` (sums, powers, root
/// powers, root levels) are work space, reused from candidate to candidate.
fn head_sums(
    (bt, by, bw): (&[f64], &[f64], &[f64]),
    tau: f64,
    den: usize,
    ends: &[usize],
    head: &mut [[f64; 3]],
    buffers: HeadBuffers,
) {
    let (sums, x, root_powers, levels) = buffers;
    let steps = x.len();
    let depth = den.trailing_zeros() as usize;
    levels.resize_with(depth + 1, Vec::new);
    levels[0].clear();
    levels[0].extend(bt.iter().map(|t| t - tau));
    for j in 0..depth {
        let (done, rest) = levels.split_at_mut(j + 1);
        rest[0].clear();
        rest[0].extend(done[j].iter().map(|v| v.sqrt()));
    }
    let sums = sized(sums, 3 * steps, 0.0);
    sums.fill(0.0);
    let (sx, rest) = sums.split_at_mut(steps);
    let (sxx, syx) = rest.split_at_mut(steps);
    // The ramps in the order of their ends, so that each bin looks at the next end only
    // (every end is at most the bin count, and the last bin's call takes those at it).
    let mut order: Vec<usize> = (0..ends.len()).collect();
    order.sort_by_key(|&r| ends[r]);
    let mut next = 0;
    let mut keep = |k: usize, sx: &[f64], sxx: &[f64], syx: &[f64]| {
        while let Some(&r) = order.get(next).filter(|&&r| ends[r] == k) {
            let kept = head[r * steps..(r + 1) * steps].iter_mut();
            for (h, ((&a, &b), &c)) in kept.zip(sx.iter().zip(sxx).zip(syx)) {
                *h = [a, b, c];
            }
            next += 1;
        }
    };
    for k in 0..bt.len() {
        keep(k, sx, sxx, syx);
        let mut roots = [0.0; 8];
        for (root, level) in roots.iter_mut().zip(&levels[1..]) {
            *root = level[k];
        }
        fill_powers(x, root_powers, levels[0][k], &roots[..depth]);
        let (w, wy) = (bw[k], bw[k] * by[k]);
        // Zipped, not indexed: the three sums then need no bounds checks and run as vectors.
        let columns = sx.iter_mut().zip(sxx.iter_mut()).zip(syx.iter_mut());
        for (((sx, sxx), syx), &v) in columns.zip(x.iter()) {
            *sx += w * v;
            *sxx += w * v * v;
            *syx += wy * v;
        }
    }
    keep(bt.len(), sx, sxx, syx);
}

/// Work space of [`head_sums`]: the three running sums, the powers, the root powers and the
/// root levels.
type HeadBuffers<'a> = (
    &'a mut Vec<f64>,
    &'a mut [f64],
    &'a mut [f64],
    &'a mut Vec<Vec<f64>>,
);

/// The first `n` entries of `v`, grown with `fill` when shorter: work space reused without
/// clearing (the caller writes what it reads).
fn sized<T: Copy>(v: &mut Vec<T>, n: usize, fill: T) -> &mut [T] {
    if v.len() < n {
        v.resize(n, fill);
    }
    &mut v[..n]
}

/// Work space of [`Bins::best_start`], kept across the candidates of one profile.
#[derive(Default)]
struct StartScratch {
    past: Vec<(f64, f64)>,
    head: Vec<[f64; 3]>,
    tail: Vec<[f64; 5]>,
    acc: Vec<[f64; 3]>,
    sums: Vec<f64>,
    x: Vec<f64>,
    root_powers: Vec<f64>,
    levels: Vec<Vec<f64>>,
    /// The exponents 1 + s / den.
    powers: Vec<f64>,
}

/// Variance inflation of a residual series whose noise is correlated (a slow wander of the
/// tracked point, say): the largest ratio, over blocks of 2, 4, 8 ... frames with at least 8
/// blocks, of the variance of block means to what independent noise would give (the blocking
/// method of Flyvbjerg and Petersen 1989). 1 or more; 1 for white noise on average.
fn correlation_inflation(residuals: &[f64]) -> f64 {
    let n = residuals.len();
    let var0 = residuals.iter().map(|r| r * r).sum::<f64>() / n.max(1) as f64;
    if var0 <= 0.0 {
        return 1.0;
    }
    let mut g = 1.0f64;
    let mut block = 2;
    while n / block >= 8 {
        let means: Vec<f64> = residuals
            .chunks_exact(block)
            .map(|c| c.iter().sum::<f64>() / block as f64)
            .collect();
        let mean = means.iter().sum::<f64>() / means.len() as f64;
        let var = means.iter().map(|m| (m - mean).powi(2)).sum::<f64>() / means.len() as f64;
        g = g.max(block as f64 * var / var0);
        block *= 2;
    }
    g
}

/// Best onset (refined between candidates by a parabola) and the 95 % interval of a profile,
/// the profile's limit widened by the residuals' correlation.
fn interval(
    candidates: &[f64],
    profile: &[Candidate],
    tt: &[f64],
    yy: &[f64],
    params: usize,
) -> Option<ProfileFit> {
    let sse: Vec<Option<f64>> = profile.iter().map(|c| c.map(|c| c.0)).collect();
    let (k_best, (sse_min, fit)) = profile
        .iter()
        .enumerate()
        .filter_map(|(k, v)| v.map(|v| (k, v)))
        .min_by(|a, b| a.1 .0.total_cmp(&b.1 .0))?;
    let onset = match (
        sse.get(k_best.wrapping_sub(1)).copied().flatten(),
        sse.get(k_best + 1).copied().flatten(),
    ) {
        (Some(a), Some(c)) => super::parabola_vertex(
            (candidates[k_best - 1], a),
            (candidates[k_best], sse_min),
            (candidates[k_best + 1], c),
        )
        .map_or(candidates[k_best], |(tv, _)| {
            tv.clamp(candidates[k_best - 1], candidates[k_best + 1])
        }),
        _ => candidates[k_best],
    };
    let residuals: Vec<f64> = tt.iter().zip(yy).map(|(&t, &y)| y - fit.at(t)).collect();
    let inflation = correlation_inflation(&residuals);
    let plain = super::profile_limit(sse_min, tt.len(), params);
    let limit = sse_min + inflation * (plain - sse_min).max(0.0);
    // The profile is jagged (each frame's noise enters or leaves the drift as tau passes
    // it), so the interval spans every candidate under the limit, not just the run around
    // the best.
    let mut inside = (0..sse.len()).filter(|&k| sse[k].is_some_and(|v| v <= limit));
    let first = inside.next()?;
    let last = inside.next_back().unwrap_or(first);
    let (early, _) = super::profile_interval(candidates, &sse, first, limit);
    let (_, late) = super::profile_interval(candidates, &sse, last, limit);
    let found = PowerOnset {
        onset,
        early: early.min(onset),
        late: late.max(onset),
    };
    let noise_var = inflation * sse_min / tt.len().saturating_sub(params).max(1) as f64;
    Some(ProfileFit {
        found,
        sse_min,
        noise_var,
        limit,
    })
}

/// A profile's onset and interval, its least residual, and the noise variance per frame
/// (widened by the residuals' correlation).
struct ProfileFit {
    found: PowerOnset,
    sse_min: f64,
    noise_var: f64,
    /// The profile's limit for the 95 % interval.
    limit: f64,
}

/// Upper 0.1 % point of chi-square with 2 degrees of freedom: the wide start's two extra
/// parameters (a higher exponent, a ramp's end) must lower the residual by this many noise
/// variances before its onset replaces the plain one. At the 5 % point one plain start in
/// twenty took the wide onset by chance, tens of ms early on a gentle start.
const CHI2_999_TWO: f64 = 13.816;

/// Profile likelihood of the onset with the start's shape as nuisance parameters: for each
/// candidate onset the residual sum of squares is the least over the shapes of the fit
/// y = a + b x(t - tau), and the 95 % interval is where that profile stays under the
/// profile-t limit, over candidates from before the first frame to a fifth of the loading after
/// the hinge. The plain shapes (exponent 1 to 2) give the onset unless the wide ones
/// (exponent to 4, a speed ramp that ends) fit better by more than chance; the interval is
/// the union of both, since a start that gentle cannot be told apart in noise.
fn power_profile(tt: &[f64], yy: &[f64], guess: f64) -> Option<PowerOnset> {
    let m = tt.len().min(yy.len());
    let span = tt.get(m.checked_sub(1)?)? - guess;
    if span <= 0.0 {
        return None;
    }
    let t_end = guess + POWER_FIT_SHARE * span;
    let used = tt[..m].partition_point(|&t| t <= t_end);
    let (tt, yy) = (&tt[..used], &yy[..used]);
    // Candidates from before the first frame (a quarter of the loading) to a fifth of the
    // loading after the hinge: a drive that eases in over most of the loading has its hinge at
    // the knee, far after its onset.
    let range = (
        (guess - 0.5 * span).min(0.0) - 0.25 * span,
        guess + 0.2 * span,
    );
    let plain = profile_pass(tt, yy, range, PLAIN)?;
    let Some(wide) = profile_pass(tt, yy, range, WIDE) else {
        return Some(plain.found);
    };
    let better = plain.sse_min - wide.sse_min > CHI2_999_TWO * wide.noise_var;
    let onset = if better {
        wide.found.onset
    } else {
        plain.found.onset
    };
    Some(PowerOnset {
        onset,
        early: plain.found.early.min(wide.found.early).min(onset),
        late: plain.found.late.max(wide.found.late).max(onset),
    })
}

/// One profile over `shapes` with candidates in `range`. Long series are binned; the profile
/// is then run again with single frames (or finer bins) around the interval the binned one
/// found, so bins never set the interval's scale.
fn profile_pass(tt: &[f64], yy: &[f64], range: (f64, f64), shapes: Shapes) -> Option<ProfileFit> {
    let used = tt.len();
    let coarse = used.div_ceil(MAX_BINS).max(1);
    let bins = Bins::new(tt, yy, coarse, coarse, (0.0, 0.0));
    if bins.t.len() < 12 {
        return None;
    }
    let candidates = bins.candidates(range);
    let fit_of = |c: &[f64], p: &[Candidate]| interval(c, p, tt, yy, shapes.params());
    let profile = bins.profile(&candidates, used, shapes, |p| fit_of(&candidates, p));
    let fit = fit_of(&candidates, &profile)?;
    if coarse == 1 {
        return Some(fit);
    }
    let bin_s = coarse as f64 * (tt[used - 1] - tt[0]) / (used - 1).max(1) as f64;
    let near = (fit.found.early - 2.0 * bin_s, fit.found.late + 2.0 * bin_s);
    let frames_near = tt.iter().filter(|&&t| t >= near.0 && t <= near.1).count();
    let fine = frames_near.div_ceil(MAX_BINS / 2).max(1);
    let bins = Bins::new(tt, yy, coarse, fine, near);
    let candidates = bins.candidates(near);
    let profile = bins.profile(&candidates, used, shapes, |p| fit_of(&candidates, p));
    fit_of(&candidates, &profile)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_distr::{Distribution, Normal};

    /// The fit is checked against a brute-force least-squares search over the same grid,
    /// solving each quadratic hinge's normal equations directly.
    fn brute_force(t: &[f64], y: &[f64]) -> f64 {
        let mut best = (f64::INFINITY, 0.0);
        for &tau in &t[1..t.len() - 3] {
            let mut m = [[0.0; 3]; 3];
            let mut v = [0.0; 3];
            for (ti, yi) in t.iter().zip(y) {
                let h = (ti - tau).max(0.0);
                let basis = [1.0, h, h * h];
                for a in 0..3 {
                    v[a] += basis[a] * yi;
                    for b in 0..3 {
                        m[a][b] += basis[a] * basis[b];
                    }
                }
            }
            let Some(c) = crate::detect::solve_linear(m, v) else {
                continue;
            };
            let sse: f64 = t
                .iter()
                .zip(y)
                .map(|(ti, yi)| {
                    let h = (ti - tau).max(0.0);
                    (yi - c[0] - c[1] * h - c[2] * h * h).powi(2)
                })
                .sum();
            if sse < best.0 {
                best = (sse, tau);
            }
        }
        best.1
    }

    /// A held level, then a drift that reaches two noise SD (1.0) `visible_s` after its onset
    /// at 0.3 s: linear, or a cubic start (a drive ramping its speed up) that does.
    fn drifting(seed: u64, cubic: bool, visible_s: f64) -> (Vec<f64>, Vec<f64>) {
        let fps = 1000.0;
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let noise = Normal::new(0.0, 1.0).unwrap();
        let t: Vec<f64> = (0..1200).map(|k| k as f64 / fps).collect();
        let y = t
            .iter()
            .map(|&t| {
                let h = ((t - 0.3) / visible_s).max(0.0);
                -2.0 * if cubic { h.powi(3) } else { h } + noise.sample(&mut rng)
            })
            .collect();
        (t, y)
    }

    #[test]
    fn departure_is_where_the_drift_stands_two_noise_sd_out_linear_or_ramped() {
        // The truth is 0.3 + visible_s. The time to cross from noise alone: the mean of 16
        // frames has SD 0.25, over a slope of 2 / visible_s per s; medians over 21 seeds.
        for (cubic, visible_s, tol_s) in [(false, 0.1, 0.008), (true, 0.2, 0.008)] {
            let mut errors: Vec<f64> = (0..21)
                .filter_map(|seed| {
                    let (t, y) = drifting(seed, cubic, visible_s);
                    departure_s(&t, &y, 0.3, t.len(), 1.0).map(|d| d - (0.3 + visible_s))
                })
                .collect();
            assert_eq!(errors.len(), 21);
            errors.sort_by(f64::total_cmp);
            let median = errors[10];
            assert!(median.abs() < tol_s, "cubic {cubic}: median {median}");
        }
    }

    /// 0.8 s at 1000 fps: held, then a straight drift of `drift` noise SD from 0.3 s to the
    /// end, plus a random walk smoothed over 50 ms scaled to `wander` noise SD.
    fn wandering(seed: u64, drift: f64, wander: f64) -> (Vec<f64>, Vec<f64>) {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let noise = Normal::new(0.0, 1.0).unwrap();
        let n = 800;
        let t: Vec<f64> = (0..n).map(|k| k as f64 / 1000.0).collect();
        let mut walk = vec![0.0; n];
        for k in 1..n {
            walk[k] = walk[k - 1] + noise.sample(&mut rng);
        }
        let smooth: Vec<f64> = (0..n)
            .map(|k| {
                let (a, b) = (k.saturating_sub(25), (k + 25).min(n));
                walk[a..b].iter().sum::<f64>() / (b - a) as f64
            })
            .collect();
        let mean = smooth.iter().sum::<f64>() / n as f64;
        let sd = (smooth.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n as f64).sqrt();
        let y = t
            .iter()
            .zip(&smooth)
            .map(|(&t, w)| {
                let load = drift * ((t - 0.3) / 0.5).max(0.0);
                load + wander * (w - mean) / sd + noise.sample(&mut rng)
            })
            .collect();
        (t, y)
    }

    #[test]
    fn a_wandering_measure_widens_the_onset_interval_until_it_covers_the_truth() {
        // A straight drift of 8 noise SD with a wander of 1 SD: the profile interval alone
        // treats the wander as drift and covered the onset on 20 of 40 trials when this test
        // was written; widened, on 25. The wander's SD is underestimated where it looks like
        // drift (the monotone fit takes it in), so the widening is partial: it must add at
        // least four trials and reach three in five.
        let (mut plain, mut widened) = (0, 0);
        for seed in 0..40 {
            let (t, y) = wandering(seed, 8.0, 1.0);
            let Some(mut found) = detect_loading(&t, &y, t.len(), 1e-3) else {
                continue;
            };
            plain += usize::from(found.early_s <= 0.3 && 0.3 <= found.late_s);
            widen_for_wander(&t, &y, &mut found, t.len(), 1.0);
            widened += usize::from(found.early_s <= 0.3 && 0.3 <= found.late_s);
        }
        assert!(
            widened >= plain + 4 && widened >= 24,
            "covered {widened} of 40 (unwidened {plain})"
        );
    }

    #[test]
    fn white_noise_alone_leaves_the_onset_interval_nearly_as_it_was() {
        let mut added_ms = Vec::new();
        for seed in 0..21 {
            let (t, y) = wandering(100 + seed, 20.0, 0.0);
            let mut found = detect_loading(&t, &y, t.len(), 1e-3).unwrap();
            let before = found.uncertainty_ms;
            widen_for_wander(&t, &y, &mut found, t.len(), 1.0);
            added_ms.push(found.uncertainty_ms - before);
        }
        added_ms.sort_by(f64::total_cmp);
        assert!(added_ms[10] < 1.0, "median widening {} ms", added_ms[10]);
    }

    #[test]
    fn pool_adjacent_violators_gives_the_non_decreasing_least_squares_fit() {
        // Worked by hand: 1, 3, 2, 4 -> 1, 2.5, 2.5, 4; 5, 4, 3 -> 4, 4, 4.
        let runs = pool_adjacent([1.0, 3.0, 2.0, 4.0].into_iter());
        assert_eq!(runs, vec![(1.0, 0, 1), (2.5, 1, 2), (4.0, 3, 1)]);
        let runs = pool_adjacent([5.0, 4.0, 3.0].into_iter());
        assert_eq!(runs, vec![(4.0, 0, 3)]);
    }

    #[test]
    fn a_flat_record_or_an_onset_in_the_first_frames_has_no_departure() {
        let (t, y) = drifting(3, false, 100.0);
        assert_eq!(departure_s(&t, &y, 0.3, t.len(), 1.0), None);
        let (t, y) = drifting(3, false, 0.1);
        assert_eq!(departure_s(&t, &y, 0.005, t.len(), 1.0), None);
    }

    fn centred(t: &[f64], y: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let mean = y.iter().sum::<f64>() / y.len() as f64;
        (
            t.iter().map(|v| v - t[0]).collect(),
            y.iter().map(|v| v - mean).collect(),
        )
    }

    #[test]
    fn hinge_onset_matches_brute_force_and_truth() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let noise = Normal::new(0.0, 0.5).unwrap();
        let t: Vec<f64> = (0..300).map(|k| k as f64 * 1e-3).collect();
        let y: Vec<f64> = t
            .iter()
            .map(|&t| 100.0 - 40.0 * (t - 0.120).max(0.0) + noise.sample(&mut rng))
            .collect();
        let (tt, yy) = centred(&t, &y);
        let hinge = hinge(&tt, &yy).unwrap();
        let reference = brute_force(&t, &y);
        assert!(
            (hinge.onset - reference).abs() <= 1e-3,
            "{} vs {}",
            hinge.onset,
            reference
        );
        assert!(hinge.drift_per_s < 0.0);
        // The reported 95 % interval (power-law profile) covers the truth.
        let found = detect_loading(&t, &y, 300, 1e-3).unwrap();
        let miss_ms = (found.onset_s - 0.120).abs() * 1e3;
        assert!(
            miss_ms <= found.uncertainty_ms && miss_ms < 12.0,
            "{found:?}"
        );
    }

    /// Slow reference for the power-law profile: every frame as a candidate onset, the
    /// exponent on a grid of 0.01 with `powf`, each fit solved from its normal equations.
    fn power_reference(tt: &[f64], yy: &[f64], used: usize, range: (f64, f64)) -> (f64, f64, f64) {
        let (tt, yy) = (&tt[..used], &yy[..used]);
        let mut profile = Vec::new();
        let mut best_residuals = (f64::INFINITY, Vec::new());
        for &tau in tt.iter().filter(|&&t| t >= range.0 && t <= range.1) {
            let mut least = f64::INFINITY;
            for step in 0..=100 {
                let p = 1.0 + step as f64 / 100.0;
                let x: Vec<f64> = tt.iter().map(|t| (t - tau).max(0.0).powf(p)).collect();
                let (slope, intercept) = crate::detect::line_fit(&x, yy).unwrap();
                let sse: f64 = x
                    .iter()
                    .zip(yy)
                    .map(|(x, y)| (y - intercept - slope * x).powi(2))
                    .sum();
                least = least.min(sse);
                if sse < best_residuals.0 {
                    let r = x.iter().zip(yy).map(|(x, y)| y - intercept - slope * x);
                    best_residuals = (sse, r.collect());
                }
            }
            profile.push((tau, least));
        }
        let best = profile
            .iter()
            .copied()
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .unwrap();
        // The same limit as the profile's, widened by the residuals' correlation.
        let plain = crate::detect::profile_limit(best.1, used, 4);
        let limit = best.1 + correlation_inflation(&best_residuals.1) * (plain - best.1);
        let inside: Vec<f64> = profile
            .iter()
            .filter(|p| p.1 <= limit)
            .map(|p| p.0)
            .collect();
        (best.0, inside[0], inside[inside.len() - 1])
    }

    #[test]
    fn power_profile_matches_a_direct_fit_with_and_without_bins() {
        // 4000 fps: 1000 frames, so the profile runs binned and then on single frames.
        for (fps, seed) in [(500.0, 7), (4000.0, 8)] {
            let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
            let noise = Normal::new(0.0, 0.5).unwrap();
            let n = (0.25 * fps) as usize;
            let t: Vec<f64> = (0..n).map(|k| k as f64 / fps).collect();
            let y: Vec<f64> = t
                .iter()
                .map(|&t| 100.0 + 14.0 * ((t - 0.1) / 0.15).max(0.0).powf(1.5))
                .map(|v| v + noise.sample(&mut rng))
                .collect();
            let (tt, yy) = centred(&t, &y);
            let guess = 0.1;
            let span = tt[n - 1] - guess;
            let used = tt.partition_point(|&t| t <= guess + POWER_FIT_SHARE * span);
            let range = (guess - 0.5 * span, guess + 0.2 * span);
            let found = profile_pass(&tt[..used], &yy[..used], range, PLAIN)
                .unwrap()
                .found;
            let (onset, early, late) = power_reference(&tt, &yy, used, range);
            // Within one frame and a half: the profile is refined between frames and its ends
            // interpolated to where it crosses the limit, the reference is not; the exponent is
            // interpolated between eighths rather than searched finely, and the correlation
            // widening comes from each one's own best fit.
            let frame = 1.5 / fps;
            for (what, got, want) in [
                ("onset", found.onset, onset),
                ("early end", found.early, early),
                ("late end", found.late, late),
            ] {
                assert!(
                    (got - want).abs() <= frame,
                    "{fps} fps {what}: {got} vs {want}"
                );
            }
        }
    }

    /// Frames from 0 to `release` of a flat measure that drifts from `onset` as a power law
    /// (exponent 1-1.8, rise 6-21) in noise of 0.5.
    fn power_law_start(
        rng: &mut rand_chacha::ChaCha8Rng,
        fps: f64,
        onset: f64,
        release: f64,
    ) -> (Vec<f64>, Vec<f64>) {
        let noise = Normal::new(0.0, 0.5).unwrap();
        let p = rng.gen_range(1.0..1.8);
        let drift = rng.gen_range(6.0..21.0);
        let n = (release * fps) as usize;
        let t: Vec<f64> = (0..n).map(|k| k as f64 / fps).collect();
        let y = t
            .iter()
            .map(|&t| 120.0 + drift * ((t - onset) / (release - onset)).max(0.0).powf(p))
            .map(|v| v + noise.sample(rng))
            .collect();
        (t, y)
    }

    #[test]
    fn interval_covers_power_law_starts_about_as_often_as_it_claims() {
        // Starts from straight to nearly constant acceleration, 20-75 frames of loading in
        // 0.5-unit noise. A quarter-step exponent grid covered 45-80 % of such onsets.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let trials = 200;
        let mut covered = 0;
        let mut widths = Vec::new();
        for _ in 0..trials {
            let fps = [500.0, 1000.0, 4000.0][rng.gen_range(0..3)];
            let onset = rng.gen_range(0.05..0.12);
            let release = onset + rng.gen_range(0.04..0.15);
            let (t, y) = power_law_start(&mut rng, fps, onset, release);
            let found = detect_loading(&t, &y, t.len(), 1.0 / fps).unwrap();
            if (found.onset_s - onset).abs() * 1e3 <= found.uncertainty_ms {
                covered += 1;
            }
            widths.push((found.late_s - found.early_s) / (release - onset));
        }
        // 0.95 claimed; 200 trials give a binomial sd of 0.015. The reported interval joins
        // the wide starts' (exponent to 4, ramps) to the plain ones', so it may cover more.
        let share = covered as f64 / trials as f64;
        // Measured: 0.995 covered, median interval 0.31 of the loading (0.24 before the
        // cycloidal ramp and the finer ramp lengths joined the wide starts).
        let width = crate::detect::median(&widths);
        assert!(share >= 0.92, "covered {share}");
        assert!(width <= 0.35, "median interval {width} of the loading");
    }

    #[test]
    fn interval_covers_power_law_starts_at_100k_fps() {
        // Some 7,000-12,000 frames in the fit, where the exponent in sixteenths leaves too
        // much misfit for the interval's limit.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(12);
        let fps = 100_000.0;
        let trials = 100;
        let mut covered = 0;
        for _ in 0..trials {
            let onset = rng.gen_range(0.05..0.08);
            let release = onset + rng.gen_range(0.04..0.08);
            let (t, y) = power_law_start(&mut rng, fps, onset, release);
            let found = detect_loading(&t, &y, t.len(), 1.0 / fps).unwrap();
            if found.early_s <= onset && onset <= found.late_s {
                covered += 1;
            }
        }
        // 0.97 measured here, 0.89 with sixteenths. 100 trials give a binomial sd of 0.02
        // at 0.95, so 0.93 is 1 sd below the claim.
        let share = covered as f64 / trials as f64;
        assert!(share >= 0.93, "covered {share}");
    }

    #[test]
    fn sin_pi_matches_the_library_sine() {
        for k in 0..=10_000 {
            let u = k as f64 / 10_000.0;
            let reference = (std::f64::consts::PI * u).sin();
            assert!((sin_pi(u) - reference).abs() < 5e-16, "u {u}");
        }
    }

    #[test]
    fn flat_noise_has_no_loading_onset() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(4);
        let noise = Normal::new(0.0, 0.5).unwrap();
        let t: Vec<f64> = (0..300).map(|k| k as f64 * 1e-3).collect();
        let y: Vec<f64> = t.iter().map(|_| 100.0 + noise.sample(&mut rng)).collect();
        assert!(detect_loading(&t, &y, 300, 1e-3).is_none());
    }
}
