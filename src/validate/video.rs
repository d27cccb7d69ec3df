//! Validation on rendered video (`validate --video`): each trial's motion turns a bar about a
//! pivot (`synth::video`: a textured background, camera noise, optionally a flickering lamp),
//! the frames are written as an 8-bit PGM sequence into a work folder, and the sequence runs
//! through the same pipeline as a video-only trial of a batch (image sequence -> tracked point
//! or principal component, with the automatic measure choice -> detectors). The record is
//! scored against the synthesiser's truth with the video targets. Nothing is printed;
//! the only files written are the frames, in the folder the caller gives, each trial's
//! removed once it is measured.

use std::path::Path;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::error::Error;
use crate::measure::TrialRecord;
use crate::pipeline::{self, Scratch, TrialSpec};
use crate::report::groups::quantile_sorted;
use crate::rig::RigProfile;
use crate::synth::{self, video, SynthConfig, SynthTrial, TrialKind, Truth};

use super::ValidateConfig;

/// The swings rendered, degrees from the held position to the largest excursion: larger than
/// the bar's width at its tip (the point tracker's case) and a few degrees (the principal
/// component's case), as in `calibration/video/accuracy.rs`.
pub const SWINGS_DEG: [f64; 2] = [30.0, 3.0];
/// The lamp: 100 Hz (mains at 50 Hz, rectified), gain 1 +- 0.04.
pub const LAMP: (f64, f64) = (100.0, 0.04);
/// A release or motion peak further than this from the truth is a miss, frames (as in the
/// frame-CSV rows of the table).
const MISS_FRAMES: f64 = 10.0;
/// Loading onset counts as right within this, seconds (the target).
const LOADING_WITHIN_S: f64 = 5e-3;
/// Frequency counts as right within this share of the truth's (the target).
const FREQUENCY_WITHIN: f64 = 0.03;

/// What a rendered video validation ran and found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VideoValidation {
    pub trials: usize,
    pub fps: f64,
    pub seed: u64,
    pub width_px: usize,
    pub height_px: usize,
    /// Camera noise, grey levels (standard deviation, 8-bit scale).
    pub noise_grey: f64,
    /// Lamp flicker of the lamp scenes: frequency, Hz, and depth (gain 1 +- depth).
    pub lamp_hz: f64,
    pub lamp_depth: f64,
    /// One row per scene (swing x lamp), then all trials pooled (`scene` "all").
    pub scenes: Vec<VideoScene>,
    /// The targets, checked on all trials pooled.
    pub targets: Vec<VideoTarget>,
}

/// The scores of one scene's trials.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VideoScene {
    pub scene: String,
    /// Swing, degrees (None on the pooled row).
    pub swing_deg: Option<f64>,
    /// Lamp flicker frequency, Hz (None: steady light, or the pooled row).
    pub lamp_hz: Option<f64>,
    pub trials: usize,
    pub errors: usize,
    /// Trials whose motion came from a tracked point / from the principal component.
    pub measure_track: usize,
    pub measure_pca: usize,
    /// Video-only latch release, error in frames.
    pub release: VideoEvent,
    /// Motion peak, error in frames.
    pub motion_peak: VideoEvent,
    /// Trials with a loading onset in the record's span whose onset was found within 5 ms.
    pub loading_within_5_ms: Share,
    /// Trials whose truth rings two clear cycles whose frequency was found within 3 %.
    pub frequency_within_3_pct: Share,
}

/// Errors of one event, frames.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VideoEvent {
    /// Trials whose truth has the event.
    pub n: usize,
    /// Of those, not found or found more than 10 frames away.
    pub misses: usize,
    pub median_abs_error_frames: Option<f64>,
    pub p95_abs_error_frames: Option<f64>,
}

/// How many of `n` trials came right.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Share {
    pub ok: usize,
    pub n: usize,
    pub share: Option<f64>,
}

/// One of the targets, with the pooled value and whether it is met.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VideoTarget {
    pub name: String,
    pub target: String,
    pub value: Option<f64>,
    pub met: bool,
}

/// One rendered trial's record against its truth. Errors are signed (record minus truth);
/// `None` where the truth lacks the event.
#[derive(Debug, Clone, PartialEq)]
pub struct RenderedScore {
    /// The motion measure the record used (`track_px`, `pca1`, ...), None for an error record.
    pub measure: Option<String>,
    pub error: bool,
    /// Release error, frames; `Some(None)`: the truth has a release the record lacks.
    pub release_frames: Option<Option<f64>>,
    pub motion_peak_frames: Option<Option<f64>>,
    /// Loading onset within 5 ms, for a truth with its onset inside the record.
    pub loading_ok: Option<bool>,
    /// Frequency within 3 %, for a truth that rings.
    pub frequency_ok: Option<bool>,
}

/// A video-only synthetic trial of the classic family, at `fps`, with a noiseless motion
/// measure (the camera noise is the renderer's).
pub fn rendered_trial_config(fps: f64, duration_s: f64) -> SynthConfig {
    SynthConfig {
        fps,
        duration_s,
        audio: false,
        video_noise: 0.0,
        ..SynthConfig::default()
    }
}

/// The rig a rendered trial is measured with: `rig`'s detector settings at `fps`, with the
/// video's measure chosen automatically (no column, point, pivot or region named: those of a
/// lab's rig belong to its own camera, not the renderer's scene).
pub fn rendered_rig(rig: &RigProfile, fps: f64) -> RigProfile {
    RigProfile {
        fps: Some(fps),
        frames_column: None,
        loading_column: None,
        track_point: None,
        pivot: None,
        rois: Vec::new(),
        ..rig.clone()
    }
}

/// Writes `trial` rendered with `scene` into the new folder `dir`, runs it through the batch
/// pipeline as a video-only trial, removes the folder and returns the record.
pub fn analyze_rendered(
    trial: &SynthTrial,
    scene: &video::Scene,
    rig: &RigProfile,
    dir: &Path,
    scratch: &mut Scratch,
) -> Result<TrialRecord, Error> {
    video::write_pgm_sequence(dir, trial, scene)?;
    let spec = TrialSpec {
        name: trial.name.clone(),
        group: None,
        audio: None,
        frames: None,
        video: Some(dir.to_path_buf()),
    };
    let record = pipeline::analyze_files(&spec, rig, scratch);
    std::fs::remove_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    Ok(record)
}

/// Scores a rendered trial's record against its truth (frame period `1 / fps`).
pub fn score_rendered(record: &TrialRecord, truth: &Truth, fps: f64) -> RenderedScore {
    let frames = |t: Option<f64>, r: Option<f64>| t.map(|t| r.map(|r| (r - t) * fps));
    RenderedScore {
        measure: record.video_input.as_ref().map(|v| v.measure.clone()),
        error: record.error.is_some(),
        release_frames: frames(truth.latch_release_s, record.latch_release_video_s),
        motion_peak_frames: frames(truth.motion_peak_s, record.motion_peak_s),
        loading_ok: truth.loading_onset_s.filter(|t| *t >= 0.0).map(|t| {
            record
                .loading_onset_s
                .is_some_and(|r| (r - t).abs() <= LOADING_WITHIN_S)
        }),
        frequency_ok: truth.oscillation.as_ref().map(|o| {
            record
                .oscillation
                .as_ref()
                .is_some_and(|r| (r.frequency_hz / o.frequency_hz - 1.0).abs() <= FREQUENCY_WITHIN)
        }),
    }
}

/// The rendered scenes: every swing, without and with the lamp.
fn scenes() -> Vec<(f64, Option<(f64, f64)>)> {
    SWINGS_DEG
        .iter()
        .flat_map(|s| [(*s, None), (*s, Some(LAMP))])
        .collect()
}

fn scene_name(swing_deg: f64, lamp: Option<(f64, f64)>) -> String {
    match lamp {
        Some((hz, _)) => format!("{swing_deg} deg, {hz} Hz lamp"),
        None => format!("{swing_deg} deg, no lamp"),
    }
}

/// Renders `count` trials at `config.fps` (the scenes in turn), measures them from their
/// frames in `work_dir` (an existing folder the caller owns) and scores them.
pub fn validate_video(
    rig: &RigProfile,
    config: &ValidateConfig,
    count: usize,
    work_dir: &Path,
) -> Result<VideoValidation, Error> {
    let fps = config.fps;
    let synth_config = rendered_trial_config(fps, config.duration_s);
    let rig = rendered_rig(rig, fps);
    let scenes = scenes();
    let mut rng = ChaCha8Rng::seed_from_u64(config.seed ^ 0x5eed_0f1d_e0f1);
    let mut scratch = Scratch::default();
    let mut scores: Vec<Vec<RenderedScore>> = vec![Vec::new(); scenes.len()];
    for i in 0..count {
        let at = i % scenes.len();
        let (swing_deg, flicker) = scenes[at];
        let name = format!("validate-video-{i:05}");
        let seed: u64 = rng.gen();
        let trial = synth::generate(&name, TrialKind::Normal, &synth_config, &rig, seed);
        let scene = video::Scene {
            swing_rad: swing_deg.to_radians(),
            flicker,
            seed,
            ..video::Scene::default()
        };
        let record = analyze_rendered(&trial, &scene, &rig, &work_dir.join(&name), &mut scratch)?;
        scores[at].push(score_rendered(&record, &trial.truth, fps));
    }
    let mut rows: Vec<VideoScene> = scenes
        .iter()
        .zip(&scores)
        .map(|((swing, lamp), s)| {
            let refs: Vec<&RenderedScore> = s.iter().collect();
            scene_row(
                scene_name(*swing, *lamp),
                Some(*swing),
                lamp.map(|l| l.0),
                &refs,
            )
        })
        .collect();
    let all: Vec<&RenderedScore> = scores.iter().flatten().collect();
    let pooled = scene_row("all".to_string(), None, None, &all);
    let targets = targets(&pooled);
    rows.push(pooled);
    let defaults = video::Scene::default();
    Ok(VideoValidation {
        trials: count,
        fps,
        seed: config.seed,
        width_px: defaults.width,
        height_px: defaults.height,
        noise_grey: defaults.noise_grey,
        lamp_hz: LAMP.0,
        lamp_depth: LAMP.1,
        scenes: rows,
        targets,
    })
}

fn scene_row(
    scene: String,
    swing_deg: Option<f64>,
    lamp_hz: Option<f64>,
    scores: &[&RenderedScore],
) -> VideoScene {
    let measure_is = |pca: bool| {
        scores
            .iter()
            .filter(|s| s.measure.as_deref().is_some_and(|m| (m == "pca1") == pca))
            .count()
    };
    VideoScene {
        scene,
        swing_deg,
        lamp_hz,
        trials: scores.len(),
        errors: scores.iter().filter(|s| s.error).count(),
        measure_track: measure_is(false),
        measure_pca: measure_is(true),
        release: event(scores.iter().filter_map(|s| s.release_frames)),
        motion_peak: event(scores.iter().filter_map(|s| s.motion_peak_frames)),
        loading_within_5_ms: share(scores.iter().filter_map(|s| s.loading_ok)),
        frequency_within_3_pct: share(scores.iter().filter_map(|s| s.frequency_ok)),
    }
}

/// Misses and absolute error quantiles of signed errors (None: not found).
fn event(errors: impl Iterator<Item = Option<f64>>) -> VideoEvent {
    let all: Vec<Option<f64>> = errors.collect();
    let mut found: Vec<f64> = all
        .iter()
        .filter_map(|e| e.map(f64::abs).filter(|e| *e <= MISS_FRAMES))
        .collect();
    found.sort_by(f64::total_cmp);
    VideoEvent {
        n: all.len(),
        misses: all.len() - found.len(),
        median_abs_error_frames: (!found.is_empty()).then(|| quantile_sorted(&found, 0.5)),
        p95_abs_error_frames: (!found.is_empty()).then(|| quantile_sorted(&found, 0.95)),
    }
}

fn share(oks: impl Iterator<Item = bool>) -> Share {
    let all: Vec<bool> = oks.collect();
    let ok = all.iter().filter(|o| **o).count();
    Share {
        ok,
        n: all.len(),
        share: (!all.is_empty()).then(|| ok as f64 / all.len() as f64),
    }
}

/// The video targets on the pooled row. A target with nothing to score is not met.
fn targets(all: &VideoScene) -> Vec<VideoTarget> {
    let at_most = |name: &str, value: Option<f64>, limit: f64, text: &str| VideoTarget {
        name: name.to_string(),
        target: text.to_string(),
        value,
        met: value.is_some_and(|v| v <= limit),
    };
    let at_least = |name: &str, value: Option<f64>, limit: f64, text: &str| VideoTarget {
        name: name.to_string(),
        target: text.to_string(),
        value,
        met: value.is_some_and(|v| v >= limit),
    };
    vec![
        at_most(
            "release median abs error, frames",
            all.release.median_abs_error_frames,
            0.3,
            "<= 0.3",
        ),
        at_most(
            "motion peak median abs error, frames",
            all.motion_peak.median_abs_error_frames,
            0.3,
            "<= 0.3",
        ),
        at_least(
            "frequency within 3 %, share",
            all.frequency_within_3_pct.share,
            0.9,
            ">= 0.90",
        ),
        at_least(
            "loading onset within 5 ms, share",
            all.loading_within_5_ms.share,
            0.8,
            ">= 0.80",
        ),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn score(release: Option<f64>, loading_ok: bool) -> RenderedScore {
        RenderedScore {
            measure: Some("track_px".into()),
            error: false,
            release_frames: Some(release),
            motion_peak_frames: None,
            loading_ok: Some(loading_ok),
            frequency_ok: None,
        }
    }

    #[test]
    fn misses_are_counted_apart_from_the_median_and_targets_need_data() {
        let s = [
            score(Some(-0.2), true),
            score(Some(0.4), true),
            score(None, true),
            score(Some(12.0), true),
        ];
        let refs: Vec<&RenderedScore> = s.iter().collect();
        let row = scene_row("all".into(), None, None, &refs);
        assert_eq!((row.release.n, row.release.misses), (4, 2));
        // Two found errors, 0.2 and 0.4: the median interpolates between them.
        let median = row.release.median_abs_error_frames.unwrap();
        assert!((median - 0.3).abs() < 1e-12, "{median}");
        assert_eq!(
            (row.loading_within_5_ms.ok, row.loading_within_5_ms.n),
            (4, 4)
        );
        assert_eq!(row.motion_peak.n, 0);
        let t = targets(&row);
        // No motion peak or frequency to score: those targets are not met.
        assert!(!t[1].met && !t[2].met);
        assert!(t[3].met, "{t:?}");
    }
}
