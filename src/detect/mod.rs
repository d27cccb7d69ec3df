//! Detectors: pure functions of a decoded signal and a configuration. They never print, read
//! files or spawn threads.
//!
//! - [`filter`]: zero-phase Butterworth high-pass (second-order sections run forward and
//!   backward, as `scipy.signal.sosfiltfilt`).
//! - [`click`]: transients against a robust noise floor, AIC onset picker (Maeda 1985),
//!   click-versus-thump by spectral centroid.
//! - [`clock`]: the video frame clock (dropped frames, rounded timestamps).
//! - [`release`]: latch release and motion peak on the video clock.
//! - [`loading`]: loading onset by two-phase (hinge) regression.
//! - [`oscillation`]: per-cycle decay of the post-release oscillation (logarithmic decrement).

pub mod click;
pub mod clock;
pub mod filter;
pub mod loading;
pub mod oscillation;
pub mod phases;
pub mod release;
pub mod thump;
pub mod trace;

/// Scale from median absolute deviation to standard deviation for Gaussian noise.
pub const MAD_TO_SIGMA: f64 = 1.482_602_218_505_602;

/// Median of `values` (NaN-free); 0 for an empty slice. Reorders a scratch copy only.
pub fn median(values: &[f64]) -> f64 {
    if values.is_empty() {
        return 0.0;
    }
    let mut v = values.to_vec();
    median_in_place(&mut v)
}

/// Median that reorders `v`.
pub fn median_in_place(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    let mid = v.len() / 2;
    let (_, m, _) = v.select_nth_unstable_by(mid, f64::total_cmp);
    let upper = *m;
    if v.len() % 2 == 1 {
        upper
    } else {
        let lower = v[..mid].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        0.5 * (lower + upper)
    }
}

/// Robust standard deviation: 1.4826 times the median absolute deviation from the median.
pub fn mad_sigma(values: &[f64]) -> f64 {
    let m = median(values);
    let mut dev: Vec<f64> = values.iter().map(|x| (x - m).abs()).collect();
    MAD_TO_SIGMA * median_in_place(&mut dev)
}

/// Vertex of the parabola through three points, as (x, y); `None` when they are collinear.
pub fn parabola_vertex(p0: (f64, f64), p1: (f64, f64), p2: (f64, f64)) -> Option<(f64, f64)> {
    let (x0, y0) = p0;
    let (x1, y1) = p1;
    let (x2, y2) = p2;
    let d = (x0 - x1) * (x0 - x2) * (x1 - x2);
    if d == 0.0 {
        return None;
    }
    let a = (x2 * (y1 - y0) + x1 * (y0 - y2) + x0 * (y2 - y1)) / d;
    let b = (x2 * x2 * (y0 - y1) + x1 * x1 * (y2 - y0) + x0 * x0 * (y1 - y2)) / d;
    if a == 0.0 || !a.is_finite() {
        return None;
    }
    let c = y0 - a * x0 * x0 - b * x0;
    let xv = -b / (2.0 * a);
    Some((xv, c - b * b / (4.0 * a)))
}

/// Sub-sample extremum around index `k` of (t, y): the parabola vertex when it lies between the
/// neighbours, else the sample itself.
pub fn refine_extremum(t: &[f64], y: &[f64], k: usize) -> (f64, f64) {
    if k == 0 || k + 1 >= y.len() {
        return (t[k], y[k]);
    }
    match parabola_vertex((t[k - 1], y[k - 1]), (t[k], y[k]), (t[k + 1], y[k + 1])) {
        Some((tv, yv)) if tv >= t[k - 1] && tv <= t[k + 1] => (tv, yv),
        _ => (t[k], y[k]),
    }
}

/// Solves the N x N system m x = v by Gaussian elimination with partial pivoting; `None` when
/// it is singular.
pub fn solve_linear<const N: usize>(mut m: [[f64; N]; N], mut v: [f64; N]) -> Option<[f64; N]> {
    for col in 0..N {
        let pivot = (col..N).max_by(|&a, &b| m[a][col].abs().total_cmp(&m[b][col].abs()))?;
        if m[pivot][col].abs() < 1e-300 {
            return None;
        }
        m.swap(col, pivot);
        v.swap(col, pivot);
        for row in col + 1..N {
            let f = m[row][col] / m[col][col];
            let pivot_row = m[col];
            for (k, cell) in m[row].iter_mut().enumerate().skip(col) {
                *cell -= f * pivot_row[k];
            }
            v[row] -= f * v[col];
        }
    }
    let mut x = [0.0; N];
    for row in (0..N).rev() {
        let s: f64 = (row + 1..N).map(|k| m[row][k] * x[k]).sum();
        x[row] = (v[row] - s) / m[row][row];
    }
    x.iter().all(|v| v.is_finite()).then_some(x)
}

/// Residual sum of squares that bounds the 95 % profile-likelihood interval of one parameter
/// of a least-squares fit to `n` points with `params` parameters, the noise variance estimated
/// from the residuals: `sse_min (1 + F(0.95; 1, n - params) / (n - params))`, the profile-t
/// interval of nonlinear regression (Bates and Watts 1988, section 6.1; from memory). For many
/// points it tends to `sse_min exp(3.84 / n)`, the large-sample form, which is too narrow
/// with few: with four parameters, by 4 % at 24 points and 36 % at 10.
pub fn profile_limit(sse_min: f64, n: usize, params: usize) -> f64 {
    let dof = n.saturating_sub(params).max(1);
    sse_min.max(1e-300) * (1.0 + f95_one(dof) / dof as f64)
}

/// Upper 5 % point of F(1, dof), the square of Student's t upper 2.5 % point. From 3 degrees of
/// freedom on, by the Cornish-Fisher expansion of t in powers of 1/dof (Abramowitz and Stegun
/// 26.7.5), within 0.25 % at 3 and 2e-5 from 5 on; below 3, by the exact quantile. The
/// expansion costs a few multiplications where the exact quantile, run for every fit, cost
/// tens of microseconds per trial.
fn f95_one(dof: usize) -> f64 {
    if dof < 3 {
        use statrs::distribution::{ContinuousCDF, FisherSnedecor};
        return FisherSnedecor::new(1.0, dof as f64)
            .map(|d| d.inverse_cdf(0.95))
            .unwrap_or(161.45);
    }
    let z: f64 = 1.959_963_984_540_054;
    let v = dof as f64;
    let (z3, z5, z7, z9) = (z.powi(3), z.powi(5), z.powi(7), z.powi(9));
    let g1 = (z3 + z) / 4.0;
    let g2 = (5.0 * z5 + 16.0 * z3 + 3.0 * z) / 96.0;
    let g3 = (3.0 * z7 + 19.0 * z5 + 17.0 * z3 - 15.0 * z) / 384.0;
    let g4 = (79.0 * z9 + 776.0 * z7 + 1482.0 * z5 - 1920.0 * z3 - 945.0 * z) / 92160.0;
    let t = z + g1 / v + g2 / (v * v) + g3 / v.powi(3) + g4 / v.powi(4);
    t * t
}

/// Half-width of a likelihood interval from a profile of residual sums of squares over the grid
/// `times`: walking out from `best`, where the profile crosses `limit`, interpolated between
/// grid points (a grid end or a missing value stops the walk).
pub fn profile_half_width(times: &[f64], sse: &[Option<f64>], best: usize, limit: f64) -> f64 {
    let (lo, hi) = profile_interval(times, sse, best, limit);
    0.5 * (hi - lo)
}

/// Ends of the likelihood interval of [`profile_half_width`], in the units of `times`.
pub fn profile_interval(times: &[f64], sse: &[Option<f64>], best: usize, limit: f64) -> (f64, f64) {
    let edge = |step: isize| -> f64 {
        let mut k = best;
        loop {
            let next = k as isize + step;
            if next < 0 || next as usize >= times.len() {
                return times[k];
            }
            let next = next as usize;
            match sse[next] {
                Some(v) if v <= limit => k = next,
                Some(v) => {
                    let here = sse[k].unwrap_or(limit);
                    let f = ((limit - here) / (v - here)).clamp(0.0, 1.0);
                    return times[k] + f * (times[next] - times[k]);
                }
                None => return times[k],
            }
        }
    };
    (edge(-1), edge(1))
}

/// Standard deviation of the parabola-vertex time around sample `k` when each sample carries
/// independent noise of standard deviation `sigma` (first-order propagation).
pub fn vertex_sd(t: &[f64], y: &[f64], k: usize, sigma: f64) -> f64 {
    if k == 0 || k + 1 >= y.len() {
        return 0.0;
    }
    let base = refine_extremum(t, y, k).0;
    let eps = sigma.max(1e-9) * 1e-3;
    let mut var = 0.0;
    for j in k - 1..=k + 1 {
        let mut yy = [y[k - 1], y[k], y[k + 1]];
        yy[j + 1 - k] += eps;
        let moved = match parabola_vertex((t[k - 1], yy[0]), (t[k], yy[1]), (t[k + 1], yy[2])) {
            Some((tv, _)) => tv,
            None => base,
        };
        var += ((moved - base) / eps * sigma).powi(2);
    }
    var.sqrt()
}

/// Least-squares slope and intercept of y on x.
pub fn line_fit(x: &[f64], y: &[f64]) -> Option<(f64, f64)> {
    let n = x.len() as f64;
    if x.len() < 2 {
        return None;
    }
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|a| (a - mx) * (a - mx)).sum();
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    if sxx == 0.0 {
        return None;
    }
    let slope = sxy / sxx;
    Some((slope, my - slope * mx))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_of_odd_and_even_lengths() {
        assert_eq!(median(&[3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median(&[4.0, 1.0, 3.0, 2.0]), 2.5);
        assert_eq!(median(&[]), 0.0);
    }

    #[test]
    fn mad_sigma_of_a_known_set() {
        // Deviations from the median 3 are 2,1,0,1,2 -> MAD 1.
        assert!((mad_sigma(&[1.0, 2.0, 3.0, 4.0, 5.0]) - MAD_TO_SIGMA).abs() < 1e-12);
    }

    #[test]
    fn the_core_of_the_expected_stretch_is_the_release_uncertainty_and_the_least_tolerance() {
        // 500 fps: the sync tolerance is 2 frames (4 ms); the core is 0.25 ms plus three
        // release uncertainties (3 x 0.1 ms) either side, and both end one energy window
        // (0.5 ms) early on the left, where the window trailing the onset starts.
        let rig = RigProfile {
            video_offset_s: 0.002,
            ..RigProfile::default()
        };
        let motion = release::MotionEvents {
            release_s: 0.1,
            pre_release_index: 49,
            motion_peak_s: 0.105,
            motion_peak_index: 52,
            motion_peak_value: 1.0,
            direction: 1.0,
            peak_rate_per_s: 100.0,
            jump: 1.0,
            overshoot: false,
            release_sd_s: 0.1e-3,
            motion_peak_sd_s: 0.1e-3,
            fast_phase_end_s: 0.105,
            fast_phase_end_sd_s: 0.1e-3,
            release_rate_share: 0.0,
            departure_s: 0.1,
            earliest_release_s: 0.1,
            release_fit: None,
        };
        let video = VideoEvents {
            clock: clock::FrameClock {
                time_s: (0..100).map(|k| k as f64 * 2e-3).collect(),
                period_s: 2e-3,
                missing_frames: 0,
                uniform: true,
                max_residual_s: 0.0,
                timestamp_step_s: None,
            },
            noise_sigma: 0.01,
            motion: Some(motion),
            loading: None,
            oscillation: None,
            click_fits_frames: None,
        };
        let e = expected_click(&video, &rig).unwrap();
        let at = 0.102;
        let close = |a: f64, b: f64| (a - b).abs() < 1e-12;
        assert!(close(e.stretch.start_s, at - 4.3e-3 - 0.5e-3), "{e:?}");
        assert!(close(e.stretch.end_s, at + 4.3e-3), "{e:?}");
        assert!(close(e.core.start_s, at - 0.55e-3 - 0.5e-3), "{e:?}");
        assert!(close(e.core.end_s, at + 0.55e-3), "{e:?}");
        assert_eq!(e.stretch.false_alarm, rig.click_false_alarm);
        assert_eq!(e.core.false_alarm, rig.click_core_false_alarm);
        let mut still = video.clone();
        still.motion = None;
        assert!(expected_click(&still, &rig).is_none());
    }

    /// Half a second of white noise (RMS 0.01) at 48 kHz with a 7 kHz ring of 0.3 ms decay
    /// starting at `at_s`.
    fn ring_in_noise(seed: u64, amp: f64, at_s: f64) -> AudioSignal {
        let fs = 48_000.0;
        let mut signal = click::tests::noise_signal(fs, 0.5, 0.01, seed);
        let at = (at_s * fs) as usize;
        for j in 0..(2e-3 * fs) as usize {
            let t = j as f64 / fs;
            let ring = (2.0 * std::f64::consts::PI * 7000.0 * t).sin() * (-t / 0.3e-3).exp();
            signal.samples[at + j] += amp * ring;
        }
        signal
    }

    #[test]
    fn a_slipped_click_heard_nowhere_is_sought_again_near_the_release_at_the_core_chance() {
        // The video puts the click at 0.25 s; it sounds 20 ms later, peak about 2.4 times the
        // noise RMS. For these noise seeds the search of the group window around the expected
        // stretch at `click_false_alarm` misses it; the fallback search of that stretch at
        // the core chance finds it. With the core chance set to `click_false_alarm` the
        // fallback adds nothing. Over
        // seeds 1-12 at this level, 2 were found by the second search only, 3 by both, 2
        // took a false click instead and 5 were not found.
        let hint = |start_s: f64, end_s: f64, false_alarm: f64| click::SearchHint {
            start_s,
            end_s,
            false_alarm,
        };
        let rig = RigProfile::default();
        let expected = ExpectedClick {
            at_s: 0.25,
            stretch: hint(0.2453, 0.2548, rig.click_false_alarm),
            core: hint(0.2493, 0.2508, rig.click_core_false_alarm),
        };
        // The fallback search takes its chance from the expected click's core.
        let strict = ExpectedClick {
            core: hint(0.2493, 0.2508, rig.click_false_alarm),
            ..expected
        };
        let mut scratch = click::ClickScratch::default();
        for seed in [2, 3] {
            let signal = ring_in_noise(seed, 0.026, 0.27);
            let found = detect_audio(&signal, &rig, &mut scratch, Some(expected));
            let main = found.main().expect("found at the core chance");
            assert!(
                (main.onset_s - 0.27).abs() < 0.2e-3,
                "seed {seed}: {main:?}"
            );
            assert!(main.guided, "seed {seed}: {main:?}");
            let missed = detect_audio(&signal, &rig, &mut scratch, Some(strict));
            assert!(missed.main().is_none(), "seed {seed}: {:?}", missed.main());
            // Without a video release nothing says the trial fired: no second search.
            let blind = detect_audio(&signal, &rig, &mut scratch, None);
            assert!(blind.main().is_none(), "seed {seed}: {:?}", blind.main());
        }
    }

    #[test]
    fn f_quantile_matches_scipy() {
        // scipy.stats.f.ppf(0.95, 1, dof) (scipy 1.x): 161.45, 10.128, 6.6079, 4.9646, 4.034310,
        // 3.850775 for dof 1, 3, 5, 10, 50, 1000.
        for (dof, want, tol) in [
            (1, 161.448, 1e-3),
            (3, 10.1280, 0.03),
            (5, 6.60789, 2e-3),
            (10, 4.96460, 1e-4),
            (50, 4.034310, 1e-6),
            (1000, 3.850775, 1e-6),
        ] {
            let got = f95_one(dof);
            assert!(
                (got - want).abs() <= tol * want,
                "dof {dof}: {got} vs {want}"
            );
        }
        // 24 points, 4 parameters: 1 + 4.3512 / 20.
        assert!((profile_limit(2.0, 24, 4) - 2.0 * (1.0 + 4.35124 / 20.0)).abs() < 1e-4);
    }

    #[test]
    fn parabola_vertex_recovers_a_known_parabola() {
        let f = |x: f64| -2.0 * (x - 0.3) * (x - 0.3) + 5.0;
        let (xv, yv) = parabola_vertex((-1.0, f(-1.0)), (0.0, f(0.0)), (1.0, f(1.0))).unwrap();
        assert!((xv - 0.3).abs() < 1e-12 && (yv - 5.0).abs() < 1e-12);
    }
}

use serde::{Deserialize, Serialize};

use crate::rig::RigProfile;
use crate::signal::{AudioSignal, FrameSeries};
pub use click::ExpectedClick;

/// Everything found in one audio channel.
#[derive(Debug, Clone, PartialEq)]
pub struct AudioEvents {
    /// Every transient, clicks and thumps, ascending in time.
    pub transients: Vec<click::Transient>,
    /// Index into `transients` of the main click ([`click::rule`]).
    pub main_click: Option<usize>,
    /// Robust noise standard deviation of the high-passed audio (1.0 = full scale).
    pub noise_sigma: f64,
    /// Low-frequency thumps the click search does not hear ([`thump`]), audio clock, seconds.
    pub low_thumps_s: Vec<f64>,
}

impl AudioEvents {
    /// The main click and every click after it, ascending in time.
    pub fn clicks(&self) -> impl Iterator<Item = &click::Transient> {
        use click::Role;
        self.transients
            .iter()
            .filter(|t| matches!(t.role, Role::Main | Role::Later | Role::Faint))
    }

    /// Transients of the given role, ascending in time.
    pub fn with_role(&self, role: click::Role) -> impl Iterator<Item = &click::Transient> {
        self.transients.iter().filter(move |t| t.role == role)
    }

    /// The main click.
    pub fn main(&self) -> Option<&click::Transient> {
        self.main_click.map(|i| &self.transients[i])
    }
}

/// Everything found in one frame series.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VideoEvents {
    pub clock: clock::FrameClock,
    /// Per-frame noise standard deviation of the motion measure.
    pub noise_sigma: f64,
    pub motion: Option<release::MotionEvents>,
    pub loading: Option<loading::LoadingOnset>,
    pub oscillation: Option<oscillation::Oscillation>,
    /// Whether the frames also accept, as the release, the time the main click puts it at
    /// ([`check_click_against_frames`]); `None` until checked, or when no fit can say.
    #[serde(default)]
    pub click_fits_frames: Option<bool>,
}

impl From<&RigProfile> for click::ClickConfig {
    fn from(rig: &RigProfile) -> Self {
        click::ClickConfig {
            highpass_hz: rig.highpass_hz,
            false_alarm: rig.click_false_alarm,
            window_ms: rig.click_window_ms,
            merge_ms: rig.click_merge_ms,
            min_centroid_hz: rig.min_click_centroid_hz,
            detection_top_hz: rig.click_detection_top_hz,
            group_window_ms: rig.double_click_window_ms,
            group_level_db: rig.double_click_db,
            ..click::ClickConfig::default()
        }
    }
}

impl From<&RigProfile> for release::ReleaseConfig {
    fn from(rig: &RigProfile) -> Self {
        release::ReleaseConfig {
            rate_fraction: rig.release_rate_fraction,
            min_jump_sigma: rig.release_min_jump_sigma,
            max_release_ms: rig.max_release_ms,
        }
    }
}

/// Finds and names the transients of one audio channel ([`click::detect_clicks`]).
///
/// `expected` is where the click should be heard, from the video ([`expected_click`]); that
/// stretch and the group window around it are searched at the levels their lengths earn.
pub fn detect_audio(
    signal: &AudioSignal,
    rig: &RigProfile,
    scratch: &mut click::ClickScratch,
    expected: Option<ExpectedClick>,
) -> AudioEvents {
    detect_coded_audio(signal, rig, false, scratch, expected)
}

/// [`detect_audio`] on audio that may have gone through a transform codec (`lossy`), whose
/// pre-echo must not be taken for a click before the release ([`click::ClickConfig`]).
pub fn detect_coded_audio(
    signal: &AudioSignal,
    rig: &RigProfile,
    lossy: bool,
    scratch: &mut click::ClickScratch,
    expected: Option<ExpectedClick>,
) -> AudioEvents {
    let config = click::ClickConfig {
        lossy_codec: lossy,
        ..click::ClickConfig::from(rig)
    };
    let report = click::detect_clicks(signal, &config, scratch, expected.as_ref());
    // A loud click carries some low-frequency energy of its own: no thump starts inside one.
    let clicks: Vec<(f64, f64)> = report
        .transients
        .iter()
        .filter(|t| t.is_click)
        .map(|t| (t.onset_s - 5e-3, t.onset_s + t.duration_ms * 1e-3 + 5e-3))
        .collect();
    let low_thumps_s = thump::detect_thumps(signal, &clicks, &thump::ThumpConfig::default());
    AudioEvents {
        transients: report.transients,
        main_click: report.main,
        noise_sigma: report.noise_sigma,
        low_thumps_s,
    }
}

/// Where the click of the video's latch release should be heard. `None` without a release.
pub fn expected_click(video: &VideoEvents, rig: &RigProfile) -> Option<ExpectedClick> {
    let m = video.motion.as_ref()?;
    let min_s = rig.sync_tolerance_min_ms * 1e-3;
    let tolerance_s = (rig.sync_tolerance_frames * video.clock.period_s).max(min_s);
    let at_s = rig.audio_time_s(m.release_s);
    let window_s = rig.click_window_ms * 1e-3;
    let hint = |half_s: f64, false_alarm: f64| click::SearchHint {
        start_s: at_s - half_s - window_s,
        end_s: at_s + half_s,
        false_alarm,
    };
    let stretch = hint(tolerance_s + 3.0 * m.release_sd_s, rig.click_false_alarm);
    let core = hint(min_s + 3.0 * m.release_sd_s, rig.click_core_false_alarm);
    Some(ExpectedClick {
        at_s,
        stretch,
        core,
    })
}

/// Runs the video detectors.
pub fn detect_video(series: &FrameSeries, rig: &RigProfile) -> VideoEvents {
    let clock = clock::frame_clock(series);
    let t = &clock.time_s;
    let y = &series.motion;
    let printed = series
        .motion_step
        .unwrap_or_else(|| trace::column_print_step(y));
    let noise_sigma = trace::noise_sigma(y, printed);
    let motion = release::detect_release(t, y, clock.period_s, noise_sigma, &rig.into());
    let loading_end = match &motion {
        Some(m) => m.pre_release_index + 1,
        None => {
            // A failed trigger loads and relaxes: the onset search ends at the largest excursion.
            let l = &series.loading;
            let head = median(&l[..(l.len() / 10).max(1)]);
            l.iter()
                .enumerate()
                .max_by(|a, b| (a.1 - head).abs().total_cmp(&(b.1 - head).abs()))
                .map_or(0, |(i, _)| i + 1)
        }
    };
    let loading_step = series
        .loading_step
        .unwrap_or_else(|| trace::column_print_step(&series.loading));
    let loading_sigma = trace::noise_sigma(&series.loading, loading_step);
    let loading = loading::detect_loading(t, &series.loading, loading_end, clock.period_s).map(
        |mut found| {
            loading::read_departure_and_wander(
                t,
                &series.loading,
                &mut found,
                loading_end,
                loading_sigma,
            );
            found
        },
    );
    // The oscillation starts at the data's own first extremum; its fitted model never moves
    // the motion peak.
    let oscillation = motion.as_ref().filter(|m| m.overshoot).and_then(|m| {
        oscillation::detect_oscillation(
            t,
            y,
            m.motion_peak_index,
            (m.motion_peak_s, m.motion_peak_value),
            m.direction,
            noise_sigma,
            clock.period_s,
        )
        .map(|found| found.0)
    });
    VideoEvents {
        clock,
        noise_sigma,
        motion,
        loading,
        oscillation,
        click_fits_frames: None,
    }
}

/// Asks the frames whether the release could lie where the main click puts it (the clock
/// relation applied backwards): before a clock mismatch is flagged, a video release that the
/// frames time poorly must be told from clocks that disagree. Sets
/// `video.click_fits_frames`.
pub fn check_click_against_frames(video: &mut VideoEvents, audio: &AudioEvents, rig: &RigProfile) {
    let (Some(m), Some(click)) = (video.motion.as_ref(), audio.main()) else {
        return;
    };
    let implied_s = click.onset_s - rig.acoustic_delay_s() - rig.video_offset_s;
    video.click_fits_frames = Some(release::frames_allow_release_at(
        m,
        video.clock.period_s,
        implied_s,
    ));
}
