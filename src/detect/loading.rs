//! Loading onset by two-phase regression: the measure is flat, then drifts,
//! y = a + b h + c h^2 with h = max(0, t - tau), or the straight hinge (c = 0) when the
//! curvature does not reduce the residual beyond noise (nested F test). The quadratic term lets a drift start gently
//! (muscles and motors seldom ramp up at once), which a straight hinge would time late with an
//! overconfident interval. For every candidate tau on the frame clock the least-squares fit
//! comes from running power sums in O(1), so the whole search is one pass; the best tau is
//! refined between frames by a parabola through the residual sums of squares. The drift must be
//! significant against a flat segment (F statistic), else there is no loading onset. The 95 %
//! interval is the set of tau whose likelihood ratio to the best stays under chi-square(1) = 3.84.

use serde::{Deserialize, Serialize};

/// F statistic the hinge must reach over a flat line. Default 30: well above the F(3, n) 99.9 %
/// point, because the best of many candidate onsets is being tested.
pub const MIN_F: f64 = 30.0;

/// A loading onset and its uncertainty.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoadingOnset {
    /// Loading onset, video clock, seconds.
    pub onset_s: f64,
    /// Half-width of the 95 % likelihood interval, ms (at least half a frame period).
    pub uncertainty_ms: f64,
    /// Drift rate shortly after the onset (a tenth of the way to the release), units per second.
    pub drift_per_s: f64,
    /// F statistic of the hinge against a flat line.
    pub f_statistic: f64,
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
    if f_statistic < MIN_F || k_best == 0 {
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
    let (onset, profile, k_chosen, sse_chosen) = if curvature_f > 1.0 {
        (onset_curved, &curved, k_best, sse_min)
    } else {
        (onset_straight, &straight, k_line, sse_line)
    };
    // The interval's ends are interpolated between frames, where the profile crosses the limit.
    let limit = sse_chosen.max(1e-300) * (3.84 / nf).exp();
    let statistical_s = super::profile_half_width(&tt, profile, k_chosen, limit);
    // Where the straight and the curved start disagree, neither is known to be the true
    // shape: their difference joins the interval in quadrature (model-form uncertainty).
    let half_width_s = statistical_s.hypot(1.96 * (onset_straight - onset_curved).abs());
    Some(LoadingOnset {
        onset_s: onset + t0,
        uncertainty_ms: half_width_s.max(0.5 * period_s) * 1e3,
        drift_per_s: drift,
        f_statistic,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
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

    #[test]
    fn hinge_onset_matches_brute_force_and_truth() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let noise = Normal::new(0.0, 0.5).unwrap();
        let t: Vec<f64> = (0..300).map(|k| k as f64 * 1e-3).collect();
        let y: Vec<f64> = t
            .iter()
            .map(|&t| 100.0 - 40.0 * (t - 0.120).max(0.0) + noise.sample(&mut rng))
            .collect();
        let found = detect_loading(&t, &y, 300, 1e-3).unwrap();
        let reference = brute_force(&t, &y);
        assert!(
            (found.onset_s - reference).abs() <= 1e-3,
            "{} vs {}",
            found.onset_s,
            reference
        );
        // A straight drift read by the curved model starts a little early; the reported 95 %
        // interval (which carries the straight-versus-curved difference) covers the truth.
        let miss_ms = (found.onset_s - 0.120).abs() * 1e3;
        assert!(
            miss_ms <= found.uncertainty_ms && miss_ms < 12.0,
            "{found:?}"
        );
        assert!(found.drift_per_s < 0.0);
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
