//! Issue 14's conditions, one test each, on the synthesiser's families (fixed seed 7, 60
//! trials of one family, 96 kHz / 2000 fps). Each assertion states the target it checks, or,
//! where the target is not met yet, guards today's measured level and says so; the measured
//! figures are in each comment. Conditions with unit tests of their own name them.

use latchtime::synth::{self, Family};
use latchtime::validate::{validate, EventAccuracy, FamilyAccuracy, FlagAccuracy, ValidateConfig};
use latchtime::RigProfile;

fn family(f: Family) -> FamilyAccuracy {
    let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).unwrap();
    let config = ValidateConfig {
        count: 60,
        seed: 7,
        sample_rate_hz: 96_000,
        fps: 2000.0,
        families: vec![(f, 1.0)],
        ..ValidateConfig::default()
    };
    let r = validate(&rig, &config);
    assert_eq!(r.errors, 0);
    r.families.into_iter().next().unwrap()
}

fn event<'a>(r: &'a FamilyAccuracy, name: &str) -> &'a EventAccuracy {
    r.events
        .iter()
        .find(|e| e.event == name && e.band == "all")
        .unwrap_or_else(|| panic!("no row {name}"))
}

fn flag<'a>(r: &'a FamilyAccuracy, name: &str) -> &'a FlagAccuracy {
    r.flags.iter().find(|f| f.flag == name).unwrap()
}

fn median(r: &FamilyAccuracy, name: &str) -> f64 {
    event(r, name).median_abs_error.unwrap()
}

#[test]
fn condition_1_ringing_faster_than_the_release_is_not_the_release() {
    // Also `detect::phases::the_first_move_is_the_release_when_the_ringing_is_steeper_and_larger`.
    let r = family(Family::FastRinging);
    // Target: video release and motion peak median <= 0.3 frame (measured 0.28 and 0.16).
    assert!(median(&r, "latch_release_video_s") <= 0.3, "{r:?}");
    assert!(median(&r, "motion_peak_s") <= 0.3, "{r:?}");
    // No release is lost to a ringing swing and no clock disagreement invented.
    assert_eq!(flag(&r, "no_release").false_positives, 0);
    assert_eq!(flag(&r, "sync_mismatch").false_positives, 0);
}

#[test]
fn condition_3_small_jumps_are_timed_from_averaged_rates() {
    // Also `detect::phases::a_small_jump_of_ten_noise_sd_is_found_by_smoothing`.
    let r = family(Family::SmallJump);
    // Jumps of 10-20 noise SD. Target 0.3 frame not met: measured 0.46 (release) and 0.74
    // (peak); guarded at 0.6 and 0.9. No fast phase is missed.
    assert!(median(&r, "latch_release_video_s") <= 0.6, "{r:?}");
    assert!(median(&r, "motion_peak_s") <= 0.9, "{r:?}");
    assert_eq!(event(&r, "latch_release_video_s").misses, 0);
    assert_eq!(flag(&r, "no_release").false_positives, 0);
}

#[test]
fn condition_4_a_ramped_drive_is_covered_and_a_record_begun_mid_loading_says_so() {
    let ramped = family(Family::RampedDrive);
    // Onset: target coverage >= 0.85 met (measured 0.875; 0.00-0.12 before the wide starts
    // and 0.51 before the cycloidal ramp), guarded at 0.8. The onset itself is 10 % of the
    // loading late (median): target not met, guarded at 15 %.
    let onset = event(&ramped, "loading_onset_s");
    assert!(onset.coverage_95.unwrap() >= 0.8, "{onset:?}");
    assert!(onset.median_abs_error.unwrap() <= 15.0, "{onset:?}");
    let mid = family(Family::MidLoading);
    // Target: the record says the loading began before it (60 of 60 measured).
    let before = flag(&mid, "loading_before_record");
    assert!(before.recall.unwrap() >= 0.97, "{before:?}");
    assert_eq!(before.false_positives, 0);
    // Where the drift is too weak the onset is missing with no_loading, never placed inside
    // the record's first frames with a narrow interval: see
    // `detect::loading::tests::flat_noise_has_no_loading_onset`.
}

#[test]
fn condition_5_rounded_stamps_and_few_digits_invent_no_gap() {
    // Also `detect::clock` (stamps to 5 digits at 19 kfps) and `detect::trace` (printing step).
    let r = family(Family::RoundedLong);
    // Target: frame_gaps exact (2 of 2 true gaps, none invented).
    let gaps = flag(&r, "frame_gaps");
    assert_eq!(
        (gaps.false_positives, gaps.false_negatives),
        (0, 0),
        "{gaps:?}"
    );
    // Target 0.3 frame: measured 0.17 (release) and 0.15 (peak).
    assert!(median(&r, "latch_release_video_s") <= 0.3, "{r:?}");
    assert!(median(&r, "motion_peak_s") <= 0.3, "{r:?}");
}

#[test]
fn condition_6_a_heavily_damped_release_still_has_a_peak() {
    let r = family(Family::Damped);
    // Overshoot of 0.5-2 % of the jump. Every trial has a peak and a release. The peak's
    // target (0.3 frame) is not met: the first extremum of so flat a top is measured 4.4
    // frames early (median), release_ms 25 % short; guarded at 6 frames and 30 %.
    let peak = event(&r, "motion_peak_s");
    assert_eq!(peak.misses, 0);
    assert!(peak.median_abs_error.unwrap() <= 6.0, "{peak:?}");
    assert!(median(&r, "release_ms") <= 30.0, "{r:?}");
    // Target: the release itself within 0.3 frame not met: measured 0.39; guarded at 0.5.
    assert!(median(&r, "latch_release_video_s") <= 0.5, "{r:?}");
}

#[test]
fn condition_8_creep_before_the_snap_is_carried_by_the_release_uncertainty() {
    let r = family(Family::Creep);
    // Target 0.3 frame: measured 0.13 (release, truth the snap) and 0.18 (peak); the 95 %
    // interval of the release covers the snap on 0.89 of trials.
    let release = event(&r, "latch_release_video_s");
    assert!(release.median_abs_error.unwrap() <= 0.3, "{release:?}");
    assert!(release.coverage_95.unwrap() >= 0.85, "{release:?}");
    assert!(median(&r, "motion_peak_s") <= 0.3, "{r:?}");
}

#[test]
fn condition_9_a_poorly_timed_video_release_is_not_a_clock_mismatch() {
    // Slow-start and fast-start shapes time the video release worst (median 0.51 frame).
    let r = family(Family::Shapes);
    // Target: sync_mismatch recall >= 0.9 (14 of 14) with precision >= 0.8 (14 of 16: 2
    // slow-start shapes whose frames refuse the click are still flagged).
    let sync = flag(&r, "sync_mismatch");
    assert!(sync.recall.unwrap() >= 0.9, "{sync:?}");
    assert!(sync.precision.unwrap() >= 0.8, "{sync:?}");
}
