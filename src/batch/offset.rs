//! The clock offset a campaign suggests. Each record with both streams holds
//! `sync.residual_ms`: the observed audio-minus-video offset minus the rig's `video_offset_s`.
//! When most clean trials (measured, no flag but `sync_mismatch`) disagree with the rig by a
//! consistent amount, the rig's `video_offset_s` is probably wrong, and the median residual
//! says by how much.
//!
//! The 95 % interval of the median is distribution-free: the order statistics `x(j)` and
//! `x(n+1-j)` of the n residuals, with the largest j for which
//! `P(j <= B <= n - j) >= 0.95`, B ~ Binomial(n, 1/2) (the confidence interval for a quantile,
//! Conover, *Practical Nonparametric Statistics*, 3rd ed. 1999, section 3.2; section number
//! from memory). It needs no assumption on the residuals' shape, and at least 6 trials.

use statrs::distribution::{Binomial, DiscreteCDF};

use crate::measure::{Flag, Status, TrialRecord};

/// Confidence of the interval.
pub const CONFIDENCE: f64 = 0.95;

/// Fewest clean trials for a suggestion: below 6 no order-statistic interval reaches 95 %.
pub const MIN_TRIALS: usize = 6;

/// Ranks (1-based) of the order statistics bounding a distribution-free interval of the
/// median of `n` values at `confidence`, and the interval's exact coverage. `None` when even
/// the full range covers less.
pub fn median_interval_ranks(n: usize, confidence: f64) -> Option<(usize, usize, f64)> {
    if n == 0 {
        return None;
    }
    let b = Binomial::new(0.5, n as u64).ok()?;
    // Coverage of (x(j), x(n+1-j)) is 1 - 2 P(B <= j - 1).
    let coverage = |j: usize| 1.0 - 2.0 * b.cdf(j as u64 - 1);
    let mut best = None;
    for j in 1..=n.div_ceil(2) {
        let c = coverage(j);
        if c >= confidence {
            best = Some((j, n + 1 - j, c));
        } else {
            break;
        }
    }
    best
}

/// The residuals of a campaign's clean trials, collected record by record.
#[derive(Debug, Clone, Default)]
pub struct Residuals {
    residual_ms: Vec<f64>,
    tolerance_ms: Vec<f64>,
    mismatched: usize,
}

impl Residuals {
    /// Adds a record when it is clean and has a clock cross-check.
    pub fn add(&mut self, r: &TrialRecord) {
        let clean = r.status != Status::Error && r.flags.iter().all(|f| *f == Flag::SyncMismatch);
        let Some(sync) = r.sync.as_ref().filter(|s| s.residual_ms.is_finite()) else {
            return;
        };
        if clean {
            self.residual_ms.push(sync.residual_ms);
            self.tolerance_ms.push(sync.tolerance_ms);
            if r.flags.contains(&Flag::SyncMismatch) {
                self.mismatched += 1;
            }
        }
    }
}

/// A suggested `video_offset_s`, with the evidence for it.
#[derive(Debug, Clone, PartialEq)]
pub struct OffsetSuggestion {
    /// Clean trials with a clock cross-check.
    pub trials: usize,
    /// Of those, the ones outside the sync tolerance.
    pub mismatched: usize,
    pub median_residual_ms: f64,
    pub low_residual_ms: f64,
    pub high_residual_ms: f64,
    /// 1-based ranks of the order statistics bounding the interval.
    pub ranks: (usize, usize),
    /// Exact coverage of the interval.
    pub coverage: f64,
    /// The rig's `video_offset_s` the records were made with.
    pub current_offset_s: f64,
    pub suggested_offset_s: f64,
    pub suggested_low_s: f64,
    pub suggested_high_s: f64,
}

/// The offset the clean trials suggest, when most of them disagree with `current_offset_s`
/// beyond the sync tolerance and the median's 95 % interval lies beyond the median tolerance
/// on one side (a consistent amount, not scatter).
pub fn suggest(residuals: &Residuals, current_offset_s: f64) -> Option<OffsetSuggestion> {
    let n = residuals.residual_ms.len();
    if n < MIN_TRIALS || 2 * residuals.mismatched <= n {
        return None;
    }
    let mut sorted = residuals.residual_ms.clone();
    sorted.sort_by(f64::total_cmp);
    let (j, k, coverage) = median_interval_ranks(n, CONFIDENCE)?;
    let median = crate::report::groups::quantile_sorted(&sorted, 0.5);
    let (low, high) = (sorted[j - 1], sorted[k - 1]);
    let tolerance = crate::report::groups::quantile_sorted(
        &{
            let mut t = residuals.tolerance_ms.clone();
            t.sort_by(f64::total_cmp);
            t
        },
        0.5,
    );
    if !(low > tolerance || high < -tolerance) {
        return None;
    }
    Some(OffsetSuggestion {
        trials: n,
        mismatched: residuals.mismatched,
        median_residual_ms: median,
        low_residual_ms: low,
        high_residual_ms: high,
        ranks: (j, k),
        coverage,
        current_offset_s,
        suggested_offset_s: current_offset_s + median * 1e-3,
        suggested_low_s: current_offset_s + low * 1e-3,
        suggested_high_s: current_offset_s + high * 1e-3,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::measure::SyncCheck;

    /// Exact coverage 1 - 2 P(B <= j - 1) in integers: the slow, obviously right reference.
    fn exact_coverage(n: u32, j: u32) -> f64 {
        let mut c: u128 = 1;
        let mut tail: u128 = 0;
        for i in 0..j {
            tail += c;
            c = c * u128::from(n - i) / u128::from(i + 1);
        }
        1.0 - 2.0 * tail as f64 / 2f64.powi(n as i32)
    }

    #[test]
    fn ranks_match_exact_binomial_sums() {
        for n in 1..=100u32 {
            let got = median_interval_ranks(n as usize, 0.95);
            let want = (1..=n.div_ceil(2))
                .take_while(|j| exact_coverage(n, *j) >= 0.95)
                .last();
            match (got, want) {
                (None, None) => {}
                (Some((j, k, c)), Some(w)) => {
                    assert_eq!(j as u32, w, "n = {n}");
                    assert_eq!(k as u32, n + 1 - w, "n = {n}");
                    assert!((c - exact_coverage(n, w)).abs() < 1e-9, "n = {n}");
                }
                _ => panic!("n = {n}: {got:?} vs {want:?}"),
            }
        }
        // Tabled values (Conover 1999, table A3, from memory): n = 10 gives x(2)..x(9) at
        // 97.85 %; n = 20 gives x(6)..x(15) at 95.86 %. Fewer than 6 values give no interval.
        let (j, k, c) = median_interval_ranks(10, 0.95).unwrap();
        assert_eq!((j, k), (2, 9));
        assert!((c - 0.9785).abs() < 1e-4);
        let (j, k, c) = median_interval_ranks(20, 0.95).unwrap();
        assert_eq!((j, k), (6, 15));
        assert!((c - 0.9586).abs() < 1e-4);
        assert!(median_interval_ranks(5, 0.95).is_none());
        assert!(median_interval_ranks(6, 0.95).is_some());
    }

    fn record(residual_ms: f64) -> TrialRecord {
        let mut r = TrialRecord::empty("t", None);
        r.sync = Some(SyncCheck {
            offset_ms: residual_ms,
            acoustic_delay_ms: 0.0,
            residual_ms,
            tolerance_ms: 2.0,
            frames_accept_click: Some(residual_ms.abs() <= 2.0),
        });
        if residual_ms.abs() > 2.0 {
            r.flags.push(Flag::SyncMismatch);
            r.status = Status::Flagged;
        }
        r
    }

    #[test]
    fn a_consistent_offset_is_suggested_and_scatter_is_not() {
        let mut consistent = Residuals::default();
        for i in 0..10 {
            consistent.add(&record(12.0 + 0.1 * f64::from(i)));
        }
        let s = suggest(&consistent, 0.001).unwrap();
        assert_eq!((s.trials, s.mismatched), (10, 10));
        assert!((s.median_residual_ms - 12.45).abs() < 1e-9);
        assert!((s.suggested_offset_s - 0.01345).abs() < 1e-12);
        assert!((s.low_residual_ms - 12.1).abs() < 1e-9);
        assert!((s.high_residual_ms - 12.8).abs() < 1e-9);
        let mut scattered = Residuals::default();
        for i in 0..10 {
            scattered.add(&record(if i % 2 == 0 { 12.0 } else { -12.0 }));
        }
        assert!(suggest(&scattered, 0.0).is_none());
        let mut agreeing = Residuals::default();
        for i in 0..10 {
            agreeing.add(&record(0.1 * f64::from(i)));
        }
        assert!(suggest(&agreeing, 0.0).is_none());
    }
}
