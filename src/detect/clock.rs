//! The video frame clock. Frames lie on a uniform clock `t = t0 + k * period`, where k is the
//! frame index: the `frame` column when there is one, else the row number plus the frames found
//! missing before it. The period comes from a least-squares line through every timestamp, never
//! from differences of neighbouring stamps.
//!
//! Exported timestamps are rounded: printed to five significant digits, a stamp after the first
//! second at thousands of frames a second repeats or steps by two periods. A frame is counted
//! missing only where no rounding can explain the timestamps: where the mean offset of the
//! stamps from the row count, over runs of rows long enough to average the rounding out, rises
//! by a whole period or more. When every stamp lies within half its printing step plus 0.3 of
//! a period of the fitted clock, the fitted clock replaces the stamps.

use serde::{Deserialize, Serialize};

use super::trace::{print_step, Prefix};
use crate::signal::FrameSeries;

/// The frame clock of one trial.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FrameClock {
    /// Time of each frame on the video clock, seconds (fitted when `uniform`).
    pub time_s: Vec<f64>,
    /// Frame period, seconds.
    pub period_s: f64,
    /// Frames missing between the first and the last frame.
    pub missing_frames: u64,
    /// True when the timestamps fit a uniform clock and the fit replaced them.
    pub uniform: bool,
    /// Largest distance of a given timestamp from the uniform clock, seconds.
    pub max_residual_s: f64,
    /// Printing step of the timestamps (the median over frames), seconds; `None` when the
    /// frame rate gave the times or the stamps are written in full.
    #[serde(default)]
    pub timestamp_step_s: Option<f64>,
}

/// Timing jitter, in frame periods, still taken as part of a uniform clock (beyond rounding).
const JITTER_PERIODS: f64 = 0.3;
/// Jitter allowance, in frame periods, of the test that rounding alone explains every stamp.
/// Under a quarter period: one missing frame in the middle of a record leaves the best line
/// through the row numbers a quarter period from the stamps on either side.
const ROUNDING_ONLY_JITTER_PERIODS: f64 = 0.1;

/// Builds the frame clock of `series`.
pub fn frame_clock(series: &FrameSeries) -> FrameClock {
    let t = &series.time_s;
    let n = t.len();
    // The step of the last digit as printed ("0.0040000" is 1e-7); from the value only for
    // series that were not read from text.
    let steps: Vec<f64> = match (&series.time_step_s, series.timestamps_given) {
        (Some(printed), true) if printed.len() == n => printed.clone(),
        (_, true) => t.iter().map(|&v| print_step(v)).collect(),
        (_, false) => vec![0.0; n],
    };
    let index: Vec<f64> = match &series.frame_index {
        Some(k) => {
            let origin = k.first().copied().unwrap_or(0);
            k.iter().map(|&k| (k - origin) as f64).collect()
        }
        None if series.timestamps_given && !rounding_explains_rows(t, &steps) => {
            index_from_stamps(t, &steps)
        }
        None => (0..n).map(|k| k as f64).collect(),
    };
    let span = t[n - 1] - t[0];
    let fallback = span.max(1e-9) / (n - 1).max(1) as f64;
    let (period, origin) = super::line_fit(&index, t)
        .filter(|(p, _)| *p > 0.0 && p.is_finite())
        .unwrap_or((fallback, t[0]));
    let fitted: Vec<f64> = index.iter().map(|k| origin + period * k).collect();
    let mut max_residual_s = 0.0f64;
    let mut within = true;
    for ((a, b), q) in t.iter().zip(&fitted).zip(&steps) {
        let r = (a - b).abs();
        max_residual_s = max_residual_s.max(r);
        within &= r <= 0.5 * q + JITTER_PERIODS * period;
    }
    let monotonic = index.windows(2).all(|w| w[1] > w[0]);
    let uniform = monotonic && within;
    let missing_frames = if monotonic {
        index
            .windows(2)
            .map(|w| (w[1] - w[0] - 1.0).max(0.0).round() as u64)
            .sum()
    } else {
        0
    };
    let mut positive: Vec<f64> = steps.iter().copied().filter(|q| *q > 0.0).collect();
    let timestamp_step_s = (positive.len() * 2 > n).then(|| super::median_in_place(&mut positive));
    FrameClock {
        time_s: if uniform { fitted } else { t.clone() },
        period_s: period,
        missing_frames,
        uniform,
        max_residual_s,
        timestamp_step_s,
    }
}

/// True when one uniform clock over the row numbers passes within half its printing step
/// (plus the jitter allowance) of every stamp: then rounding explains every step and no frame
/// is missing. Feasibility of the clock t = o + p k is convex in p: for a slope p the clock's
/// origin must lie above every row's lower bound and below every upper one, and the largest
/// lower bound minus the least upper bound is a convex function of p, minimised here by a
/// ternary search. With stamps a whole printing step coarser than a frame, a frame period
/// almost commensurate with the step makes the stamps' mean offset beat by a period every few
/// thousand rows, which a windowed mean would read as a missing frame; this test does not.
fn rounding_explains_rows(t: &[f64], steps: &[f64]) -> bool {
    let n = t.len();
    let rows: Vec<f64> = (0..n).map(|k| k as f64).collect();
    let Some((period, _)) = super::line_fit(&rows, t).filter(|(p, _)| *p > 0.0) else {
        return false;
    };
    let excess = |p: f64| -> f64 {
        let jitter = ROUNDING_ONLY_JITTER_PERIODS * p;
        let (mut lower, mut upper) = (f64::NEG_INFINITY, f64::INFINITY);
        for (k, (&v, &q)) in t.iter().zip(steps).enumerate() {
            let at = v - p * k as f64;
            lower = lower.max(at - 0.5 * q - jitter);
            upper = upper.min(at + 0.5 * q + jitter);
        }
        lower - upper
    };
    let (mut lo, mut hi) = (0.99 * period, 1.01 * period);
    for _ in 0..200 {
        let a = lo + (hi - lo) / 3.0;
        let b = hi - (hi - lo) / 3.0;
        if excess(a) <= excess(b) {
            hi = b;
        } else {
            lo = a;
        }
    }
    excess(0.5 * (lo + hi)) <= 0.0
}

/// Frame index of each row from timestamps alone: the row number, plus the frames found missing
/// before it. The offset of each stamp from a clock fitted to the row numbers, in periods, is
/// averaged over `w` rows either side of every boundary between rows; where the mean after
/// exceeds the mean before by half a period or more, `round` of the largest rise in that run of
/// boundaries is the number of frames missing there. `w` grows with the square of the printing
/// step over the period, so that rounding averages out to about a tenth of a period. The gap is
/// placed at the largest raw step of the run when the stamps are finer than half a frame (there
/// a step that rounding explains is no gap), else at the run's largest rise. A stamp that falls
/// behind the count (a negative rise) is left to the uniformity check.
fn index_from_stamps(t: &[f64], steps: &[f64]) -> Vec<f64> {
    let n = t.len();
    let rows: Vec<f64> = (0..n).map(|k| k as f64).collect();
    let Some((period, origin)) = super::line_fit(&rows, t).filter(|(p, _)| *p > 0.0) else {
        return rows;
    };
    let mut sorted = steps.to_vec();
    sorted.sort_by(f64::total_cmp);
    let ratio = sorted[(3 * (n - 1)) / 4] / period;
    let offset: Vec<f64> = t
        .iter()
        .zip(&rows)
        .map(|(v, k)| (v - origin) / period - k)
        .collect();
    let w = ((10.0 * ratio * ratio).ceil() as usize).clamp(4, (n / 4).max(1));
    let prefix = Prefix::new(&offset);
    let rise = |j: usize| prefix.mean(j, j + w) - prefix.mean(j.saturating_sub(w), j);
    let fine = ratio < 0.5;
    // With coarse stamps a rise is only trusted over full windows.
    let (first, end) = if fine { (1, n) } else { (w, n + 1 - w) };
    let mut added = vec![0.0f64; n];
    let mut j = first;
    while j < end {
        if rise(j) < 0.5 {
            j += 1;
            continue;
        }
        let start = j;
        while j < end && rise(j) >= 0.5 {
            j += 1;
        }
        let by_rise = (start..j).max_by(|&a, &b| rise(a).total_cmp(&rise(b)));
        let at = if fine {
            (start..j).max_by(|&a, &b| (t[a] - t[a - 1]).total_cmp(&(t[b] - t[b - 1])))
        } else {
            by_rise
        }
        .unwrap_or(start);
        let missing = by_rise.map_or(0.0, |k| rise(k).round());
        let q = steps[at].max(steps[at - 1]);
        let explained = fine && t[at] - t[at - 1] <= period * (1.0 + JITTER_PERIODS) + q;
        if missing >= 1.0 && !explained {
            added[at] = missing;
        }
    }
    let mut cumulative = 0.0;
    rows.iter()
        .zip(&added)
        .map(|(k, a)| {
            cumulative += a;
            k + cumulative
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn series(time_s: Vec<f64>, frame_index: Option<Vec<i64>>) -> FrameSeries {
        let n = time_s.len();
        FrameSeries {
            time_s,
            frame_index,
            motion: vec![0.0; n],
            loading: vec![0.0; n],
            motion_column: "b".into(),
            loading_column: "b".into(),
            timestamps_given: true,
            ..FrameSeries::default()
        }
    }

    /// Stamps of frames `kept` at `fps` from `t0`, printed to `digits` significant digits.
    fn stamps(kept: &[i64], fps: f64, t0: f64, digits: i32) -> Vec<f64> {
        kept.iter()
            .map(|&k| {
                let exact = t0 + k as f64 / fps;
                if exact == 0.0 {
                    return 0.0;
                }
                let decimals = digits - 1 - exact.abs().log10().floor() as i32;
                let scale = 10f64.powi(decimals);
                (exact * scale).round() / scale
            })
            .collect()
    }

    #[test]
    fn rounded_timestamps_at_10000_fps_fit_a_uniform_clock_without_gaps() {
        // Timestamps printed to 5 significant digits: 1.2345 s has a 0.1 ms resolution.
        let k: Vec<i64> = (0..2000).collect();
        let t = stamps(&k, 1e4, 1.00003, 5);
        let clock = frame_clock(&series(t, None));
        assert!(clock.uniform);
        assert_eq!(clock.missing_frames, 0);
        assert!((clock.period_s - 1e-4).abs() < 1e-9);
        assert_eq!(clock.timestamp_step_s, Some(1e-4));
    }

    #[test]
    fn five_digit_stamps_over_seconds_at_19_kfps_give_the_rate_and_no_gaps() {
        // 5 s at 19,000 fps printed to 5 significant digits: after the first second the step
        // is 0.1 ms, nearly two frames, so stamps repeat and step by two periods. Row order is
        // the frame index; the rate must come out within 0.05 % (the target) and no
        // frame may be called missing.
        for (fps, t0) in [(19_000.0, 0.0), (6_000.0, -0.25), (12_345.0, 0.7)] {
            let k: Vec<i64> = (0..(5.0 * fps) as i64).collect();
            let clock = frame_clock(&series(stamps(&k, fps, t0, 5), None));
            assert_eq!(clock.missing_frames, 0, "{fps} fps");
            let rel = (1.0 / clock.period_s - fps).abs() / fps;
            assert!(rel < 5e-5, "{fps} fps: rate off by {rel}");
        }
    }

    #[test]
    fn a_period_almost_commensurate_with_coarse_stamps_invents_no_gap() {
        // 17,999.65 fps stamped to 4 significant digits for 3.4 s: after the first second each
        // printed value covers 17 or 18 frames, and the run means of the stamps' offsets beat
        // by a whole period every few thousand rows, which read as a missing frame before.
        let k: Vec<i64> = (0..61_735).collect();
        let clock = frame_clock(&series(stamps(&k, 17_999.65, 0.0, 4), None));
        assert_eq!(clock.missing_frames, 0);
        assert!((1.0 / clock.period_s / 17_999.65 - 1.0).abs() < 5e-4);
    }

    #[test]
    fn printed_steps_of_the_time_cells_set_what_rounding_explains() {
        // "0.0040000" is exact to 1e-7 although its value prints as 0.004: one frame missing
        // at 500 fps is found from the cells' own steps.
        let k: Vec<i64> = (0..237).filter(|&k| k != 121).collect();
        let t: Vec<f64> = k.iter().map(|&k| k as f64 * 2e-3).collect();
        let mut s = series(t, None);
        s.time_step_s = Some(vec![1e-7; k.len()]);
        assert_eq!(frame_clock(&s).missing_frames, 1);
    }

    #[test]
    fn frames_missing_under_coarse_stamps_are_counted_from_the_stamps_alone() {
        // Two frames dropped at row 20,000 and one at 60,000 of 19 kfps stamps printed to 5
        // significant digits: no single step shows them, the run means do.
        let k: Vec<i64> = (0..95_000)
            .filter(|k| ![20_000, 20_001, 60_000].contains(k))
            .collect();
        let clock = frame_clock(&series(stamps(&k, 19_000.0, 0.0, 5), None));
        assert_eq!(clock.missing_frames, 3);
        assert!((1.0 / clock.period_s - 19_000.0).abs() < 0.01);
    }

    #[test]
    fn dropped_frames_are_counted_from_timestamps() {
        let t: Vec<f64> = (0..100)
            .filter(|k| *k != 40 && *k != 41)
            .map(|k| k as f64 * 1e-3)
            .collect();
        let clock = frame_clock(&series(t, None));
        assert_eq!(clock.missing_frames, 2);
    }

    #[test]
    fn a_stamp_step_that_rounding_explains_is_no_gap() {
        // 2000 fps printed to 0.1 ms: steps of 0.4, 0.5 and 0.6 ms, never a gap.
        let k: Vec<i64> = (0..400).collect();
        let t: Vec<f64> = k
            .iter()
            .map(|&k| ((k as f64 / 2000.0 + 3.3e-5) * 1e4).round() / 1e4)
            .collect();
        let clock = frame_clock(&series(t, None));
        assert_eq!(clock.missing_frames, 0);
        assert!(clock.uniform);
    }

    #[test]
    fn dropped_frames_are_counted_from_the_frame_column() {
        let k: Vec<i64> = (0..100).filter(|k| *k != 7).collect();
        let t: Vec<f64> = k.iter().map(|&k| k as f64 / 2000.0).collect();
        let clock = frame_clock(&series(t, Some(k)));
        assert_eq!(clock.missing_frames, 1);
        assert!((clock.period_s - 5e-4).abs() < 1e-12);
    }
}
