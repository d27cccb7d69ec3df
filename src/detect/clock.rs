//! The video frame clock. Frames are indexed on a uniform clock `t = t0 + k * period`; the index
//! comes from the `frame` column when there is one, else from the timestamps. Exported
//! timestamps are often rounded (repeats and uneven steps at high frame rates): when every
//! timestamp lies within 0.3 frame periods of a least-squares uniform clock, the fitted clock is
//! used instead of the rounded values. Frames missing from the index are dropped frames.

use serde::{Deserialize, Serialize};

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
}

/// Largest residual, in frame periods, still taken as rounding or jitter of a uniform clock.
const UNIFORM_TOLERANCE_PERIODS: f64 = 0.3;

/// Builds the frame clock of `series`.
pub fn frame_clock(series: &FrameSeries) -> FrameClock {
    let t = &series.time_s;
    let n = t.len();
    let span = t[n - 1] - t[0];
    let index: Vec<f64> = match &series.frame_index {
        Some(k) => k
            .iter()
            .map(|&k| (k - series.frame_index_origin()) as f64)
            .collect(),
        None => {
            let steps: Vec<f64> = t
                .windows(2)
                .map(|w| w[1] - w[0])
                .filter(|d| *d > 0.0)
                .collect();
            let mut period = super::median(&steps);
            if period.is_nan() || period <= 0.0 {
                period = span / (n - 1) as f64;
            }
            // Two rounds of index assignment and refit settle the period under rounding.
            let mut idx: Vec<f64> = t.iter().map(|v| ((v - t[0]) / period).round()).collect();
            for _ in 0..2 {
                if let Some((p, _)) = super::line_fit(&idx, t) {
                    if p > 0.0 {
                        period = p;
                    }
                }
                idx = t.iter().map(|v| ((v - t[0]) / period).round()).collect();
            }
            idx
        }
    };
    let (period, origin) = super::line_fit(&index, t).unwrap_or((span / (n - 1) as f64, t[0]));
    let period = if period > 0.0 {
        period
    } else {
        span.max(1e-9) / (n - 1) as f64
    };
    let fitted: Vec<f64> = index.iter().map(|k| origin + period * k).collect();
    let max_residual_s = t
        .iter()
        .zip(&fitted)
        .fold(0.0f64, |m, (a, b)| m.max((a - b).abs()));
    let monotonic = index.windows(2).all(|w| w[1] > w[0]);
    let uniform = monotonic && max_residual_s <= UNIFORM_TOLERANCE_PERIODS * period;
    let missing_frames = if monotonic {
        index
            .windows(2)
            .map(|w| (w[1] - w[0] - 1.0).max(0.0) as u64)
            .sum()
    } else {
        t.windows(2).filter(|w| w[1] - w[0] > 1.5 * period).count() as u64
    };
    FrameClock {
        time_s: if uniform { fitted } else { t.clone() },
        period_s: period,
        missing_frames,
        uniform,
        max_residual_s,
    }
}

impl FrameSeries {
    fn frame_index_origin(&self) -> i64 {
        self.frame_index
            .as_ref()
            .and_then(|k| k.first().copied())
            .unwrap_or(0)
    }
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

    #[test]
    fn rounded_timestamps_at_10000_fps_fit_a_uniform_clock_without_gaps() {
        // Timestamps printed to 5 significant digits: 1.2345 s has a 0.1 ms resolution.
        let t: Vec<f64> = (0..2000)
            .map(|k| {
                let exact = 1.0 + k as f64 * 1e-4 + 3e-5;
                (exact * 1e4).round() / 1e4
            })
            .collect();
        let clock = frame_clock(&series(t, None));
        assert!(clock.uniform);
        assert_eq!(clock.missing_frames, 0);
        assert!((clock.period_s - 1e-4).abs() < 1e-9);
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
    fn dropped_frames_are_counted_from_the_frame_column() {
        let k: Vec<i64> = (0..100).filter(|k| *k != 7).collect();
        let t: Vec<f64> = k.iter().map(|&k| k as f64 / 2000.0).collect();
        let clock = frame_clock(&series(t, Some(k)));
        assert_eq!(clock.missing_frames, 1);
        assert!((clock.period_s - 5e-4).abs() < 1e-12);
    }
}
