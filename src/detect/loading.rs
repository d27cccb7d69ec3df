//! Loading onset by two-phase regression: the measure is flat, then drifts linearly,
//! y = a + b * max(0, t - tau). For every candidate tau on the frame clock the least-squares
//! fit comes from running sums in O(1), so the whole search is one pass; the best tau is refined
//! between frames by a parabola through the residual sums of squares. The drift must be
//! significant against a flat segment (F statistic), else there is no loading onset. The 95 %
//! interval is the set of tau whose likelihood ratio to the best stays under chi-square(1) = 3.84.

use serde::{Deserialize, Serialize};

/// F statistic the hinge must reach over a flat line. Default 30: well above the F(2, n) 99.9 %
/// point, because the best of many candidate onsets is being tested.
pub const MIN_F: f64 = 30.0;

/// A loading onset and its uncertainty.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoadingOnset {
    /// Loading onset, video clock, seconds.
    pub onset_s: f64,
    /// Half-width of the 95 % likelihood interval, ms (at least half a frame period).
    pub uncertainty_ms: f64,
    /// Drift rate after the onset, measure units per second.
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
    // Suffix sums over i > k.
    let mut st = vec![0.0; m + 1];
    let mut stt = vec![0.0; m + 1];
    let mut sty = vec![0.0; m + 1];
    let mut sy = vec![0.0; m + 1];
    for i in (0..m).rev() {
        st[i] = st[i + 1] + tt[i];
        stt[i] = stt[i + 1] + tt[i] * tt[i];
        sty[i] = sty[i + 1] + tt[i] * yy[i];
        sy[i] = sy[i + 1] + yy[i];
    }
    // The sum of yy is zero, so the intercept of each fit is -b * Sh / n.
    let sse_at = |k: usize| -> Option<(f64, f64)> {
        let tau = tt[k];
        let c = (m - k - 1) as f64;
        let sh = st[k + 1] - tau * c;
        let shh = stt[k + 1] - 2.0 * tau * st[k + 1] + tau * tau * c;
        let shy = sty[k + 1] - tau * sy[k + 1];
        let den = nf * shh - sh * sh;
        if den <= 0.0 {
            return None;
        }
        let b = nf * shy / den;
        Some(((syy - b * shy).max(0.0), b))
    };
    let sse: Vec<Option<(f64, f64)>> = (0..m)
        .map(|k| if k + 2 < m { sse_at(k) } else { None })
        .collect();
    let (k_best, (sse_min, drift)) = sse
        .iter()
        .enumerate()
        .filter_map(|(k, v)| v.map(|v| (k, v)))
        .min_by(|a, b| a.1 .0.total_cmp(&b.1 .0))?;
    let f_statistic = ((syy - sse_min) / 2.0) / (sse_min.max(1e-300) / (nf - 3.0));
    if f_statistic < MIN_F || k_best == 0 {
        return None;
    }
    let mut onset = tt[k_best];
    if let (Some(Some(a)), Some(Some(c))) = (sse.get(k_best.wrapping_sub(1)), sse.get(k_best + 1)) {
        if let Some((tv, _)) = super::parabola_vertex(
            (tt[k_best - 1], a.0),
            (tt[k_best], sse_min),
            (tt[k_best + 1], c.0),
        ) {
            if tv >= tt[k_best - 1] && tv <= tt[k_best + 1] {
                onset = tv;
            }
        }
    }
    // The interval's ends are interpolated between frames, where the profile crosses the limit.
    let limit = sse_min.max(1e-300) * (3.84 / nf).exp();
    let profile: Vec<Option<f64>> = sse.iter().map(|v| v.map(|v| v.0)).collect();
    let half_width_s = super::profile_half_width(&tt, &profile, k_best, limit);
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

    /// The fit is checked against a brute-force least-squares search over the same grid.
    fn brute_force(t: &[f64], y: &[f64]) -> f64 {
        let mut best = (f64::INFINITY, 0.0);
        for &tau in &t[1..t.len() - 2] {
            let h: Vec<f64> = t.iter().map(|v| (v - tau).max(0.0)).collect();
            let n = t.len() as f64;
            let (mh, my) = (h.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
            let shh: f64 = h.iter().map(|v| (v - mh).powi(2)).sum();
            let shy: f64 = h.iter().zip(y).map(|(a, b)| (a - mh) * (b - my)).sum();
            let b = shy / shh;
            let a = my - b * mh;
            let sse: f64 = h
                .iter()
                .zip(y)
                .map(|(hv, yv)| (yv - a - b * hv).powi(2))
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
        assert!((found.onset_s - 0.120).abs() < 5e-3, "{}", found.onset_s);
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
