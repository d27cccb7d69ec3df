//! The accuracy figures of `latchtime validate` at three rigs, with a fixed seed, guarded with
//! margins. Each assertion names the target it checks. Where a target is not met yet, the
//! assertion guards today's measured level instead and says so, so that a regression shows and
//! an improvement can tighten it.
//!
//! The guards are those of the `classic` family (the original synthesiser, whose trials these
//! seeds still give bit for bit). The widened families run too: their per-family table is
//! printed (`cargo test --release --test validate -- --nocapture`) and checked for shape only,
//! until the detectors that should meet the targets on them are in.

mod common;

use latchtime::synth::{self, Family, SynthConfig, TrialKind};
use latchtime::validate::{measure_like, validate, ValidateConfig, ValidationReport};
use latchtime::RigProfile;

fn run_families(sample_rate_hz: u32, fps: f64, families: Vec<(Family, f64)>) -> ValidationReport {
    let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).unwrap();
    let config = ValidateConfig {
        count: 300,
        seed: 1,
        sample_rate_hz,
        fps,
        families,
        ..ValidateConfig::default()
    };
    validate(&rig, &config)
}

fn run(sample_rate_hz: u32, fps: f64) -> ValidationReport {
    run_families(sample_rate_hz, fps, vec![(Family::Classic, 1.0)])
}

fn event<'a>(
    r: &'a ValidationReport,
    name: &str,
    band: &str,
) -> &'a latchtime::validate::EventAccuracy {
    r.events
        .iter()
        .find(|e| e.event == name && e.band == band)
        .unwrap_or_else(|| panic!("no row {name} / {band}"))
}

fn flag<'a>(r: &'a ValidationReport, name: &str) -> &'a latchtime::validate::FlagAccuracy {
    r.flags.iter().find(|f| f.flag == name).unwrap()
}

fn check(r: &ValidationReport) {
    let at = format!("{} Hz / {} fps", r.config.sample_rate_hz, r.config.fps);
    assert_eq!(r.errors, 0, "{at}");
    // Target: click onset median <= 20 us, p95 <= 100 us at SNR >= 10 dB.
    let click = event(r, "click_onset_s", "all");
    assert!(click.median_abs_error.unwrap() <= 20.0, "{at}: {click:?}");
    assert!(click.p95_abs_error.unwrap() <= 100.0, "{at}: {click:?}");
    // Target: misses <= 1 % (2 / 1 / 0 of 265 on this seed, all at 10-13 dB). On 6000 trials
    // 48 kHz misses 0.67-0.73 % (calibration/README.md), so this seed is a guard, not the estimate. Nothing
    // at 13 dB or more may be missed on this seed (none of 1094 was on 6000 trials).
    assert!(
        (click.misses as f64) <= 0.01 * click.n as f64,
        "{at}: {click:?}"
    );
    for band in ["13-20 dB", "20-30 dB", ">= 30 dB"] {
        let e = event(r, "click_onset_s", band);
        assert_eq!(e.misses, 0, "{at}: {e:?}");
    }
    // Target: audio-refined release median <= 0.05 ms.
    let refined = event(r, "latch_release_s (audio-refined)", "all");
    assert!(
        refined.median_abs_error.unwrap() <= 0.05,
        "{at}: {refined:?}"
    );
    // Target: video-only release median <= 0.3 frame (0.08 / 0.07 / 0.20 measured).
    let video = event(r, "latch_release_video_s", "all");
    assert!(video.median_abs_error.unwrap() <= 0.3, "{at}: {video:?}");
    // Target: motion peak median <= 0.3 frame.
    let peak = event(r, "motion_peak_s", "all");
    assert!(peak.median_abs_error.unwrap() <= 0.3, "{at}: {peak:?}");
    // Target: loading onset and loading_ms median <= 5 %, p95 <= 20 % of the loading time,
    // and the 95 % interval covering the truth at least about as often as it claims (with 265
    // onsets the binomial sd is 0.013, so 0.92 is 2.3 sd under). Measured 0.940-0.955 when
    // written; 0.989 at 1000 fps on 2026-12-03 before the widening for a wandering measure,
    // 0.992 after it (one onset more): this family's intervals are conservative, and the
    // upper guard of 0.995 only catches intervals grown wide enough to cover every onset.
    for name in ["loading_onset_s", "loading_ms"] {
        let e = event(r, name, "all");
        assert!(
            e.median_abs_error.unwrap() <= 5.0 && e.p95_abs_error.unwrap() <= 20.0,
            "{at}: {e:?}"
        );
    }
    let coverage = event(r, "loading_onset_s", "all").coverage_95.unwrap();
    assert!(
        (0.92..=0.995).contains(&coverage),
        "{at}: coverage {coverage}"
    );
    // Target: release_ms and amplification median <= 10 %, p95 <= 25 %.
    for name in ["release_ms", "amplification"] {
        let e = event(r, name, "all");
        assert!(
            e.median_abs_error.unwrap() <= 10.0 && e.p95_abs_error.unwrap() <= 25.0,
            "{at}: {e:?}"
        );
    }
    // Reported uncertainties: how often value +- 1.96 sd covers the truth. Not a target of
    // the issue (only the loading interval is); guarded at today's level less a margin, so
    // that they do not slide back. Measured 0.91 / 0.96 / 0.95 for the video release (0.70 /
    // 0.73 / 0.58 over 1800 trials when the release profile held the shape fixed, was
    // interpolated between frames and took the large-sample limit), 0.97 / 0.97 / 0.94
    // audio-refined (0.91 at 250 kHz with a linear rise lost under noise), 0.95 / 0.97 /
    // 0.94 for release_ms.
    for (name, at_least) in [
        ("latch_release_video_s", 0.86),
        ("latch_release_s (audio-refined)", 0.92),
        ("release_ms", 0.90),
    ] {
        let coverage = event(r, name, "all").coverage_95.unwrap();
        assert!(coverage >= at_least, "{at}: {name} coverage {coverage}");
    }
    // Target: amplitude ratio median absolute error <= 0.05.
    assert!(
        event(r, "amplitude_ratio", "all").median_abs_error.unwrap() <= 0.05,
        "{at}"
    );
    // Target: clipped precision and recall >= 0.97; frame_gaps exact.
    let clipped = flag(r, "clipped");
    assert!(
        clipped.precision.unwrap() >= 0.97 && clipped.recall.unwrap() >= 0.97,
        "{at}: {clipped:?}"
    );
    let gaps = flag(r, "frame_gaps");
    assert!(
        gaps.false_positives == 0 && gaps.false_negatives == 0,
        "{at}: {gaps:?}"
    );
    // Target: sync_mismatch recall >= 0.9 for offsets of 5 ms or more, false alarms <= 2 %.
    let sync = flag(r, "sync_mismatch");
    assert!(
        sync.recall.unwrap() >= 0.9 && sync.false_alarm_rate.unwrap() <= 0.021,
        "{at}: {sync:?}"
    );
    // Target: double_click and no_click precision and recall >= 0.97.
    // double_click counts every second click, and those the synthesiser makes 3-8 dB weaker
    // than a first click near the 10 dB floor cannot be heard (recall 0.81 / 0.81 / 1.0
    // measured); leaving out second clicks below 10 dB, recall is 1.0 at all three rigs (30
    // of 30 at 48 kHz; 0.967-0.975 at 48 kHz on 6000 trials of seeds 11-15, pooled 0.972).
    // Precision 1.0 / 0.968 / 1.0: one false second click at 96 kHz, 19 ms after a 16.9 dB
    // click, is one flag in 31 (0.981-0.994 there on 6000 trials), so both are guarded at
    // 0.95.
    let double = flag(r, "double_click");
    assert!(double.precision.unwrap() >= 0.95, "{at}: {double:?}");
    let audible = flag(r, latchtime::validate::DOUBLE_AUDIBLE_ROW);
    assert!(
        audible.precision.unwrap() >= 0.95 && audible.recall.unwrap() >= 0.95,
        "{at}: {audible:?}"
    );
    // no_click: every missed click is a false no_click, so its precision follows the misses
    // (1.0 / 1.0 / 1.0 measured; 0.978-0.980 at 48 kHz on 6000 trials). Recall 0.97-1.0: one empty
    // trial in 35 at 48 and 96 kHz takes a false click from noise.
    let none = flag(r, "no_click");
    assert!(
        none.precision.unwrap() >= 0.97 && none.recall.unwrap() >= 0.95,
        "{at}: {none:?}"
    );
}

#[test]
fn validation_at_48_khz_and_500_fps_meets_the_guarded_targets() {
    check(&run(48_000, 500.0));
}

#[test]
fn validation_at_96_khz_and_1000_fps_meets_the_guarded_targets() {
    check(&run(96_000, 1000.0));
}

#[test]
fn validation_at_250_khz_and_4000_fps_meets_the_guarded_targets() {
    check(&run(250_000, 4000.0));
}

#[test]
fn validation_over_every_family_reports_each_and_the_held_out_one_apart() {
    let r = run_families(96_000, 1000.0, ValidateConfig::default().families);
    print!("{}", latchtime::report::validate::render(&r));
    assert_eq!(r.errors, 0);
    let names: Vec<Family> = r.families.iter().map(|f| f.family).collect();
    assert_eq!(names.len(), Family::ALL.len(), "{names:?}");
    // The held-out family comes last and is marked; no other is.
    let last = r.families.last().unwrap();
    assert!(last.held_out && last.family == Family::HardStopBounce);
    assert_eq!(r.families.iter().filter(|f| f.held_out).count(), 1);
    // The families split the trials and the click events between them.
    assert_eq!(r.families.iter().map(|f| f.trials).sum::<usize>(), r.trials);
    let clicks = |events: &[latchtime::validate::EventAccuracy]| {
        events
            .iter()
            .find(|e| e.event == "click_onset_s" && e.band == "all")
            .map_or(0, |e| e.n)
    };
    let per_family: usize = r.families.iter().map(|f| clicks(&f.events)).sum();
    assert_eq!(per_family, clicks(&r.events));
    let text = latchtime::report::validate::render(&r);
    assert!(text.contains("held out (no setting was tuned on these"));
}

#[test]
fn like_measures_fast_ringing_and_rounded_stamps_from_a_labs_files() {
    let dir = tempfile::tempdir().unwrap();
    let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).unwrap();
    for (i, family) in [Family::FastRinging, Family::RoundedLong]
        .into_iter()
        .enumerate()
    {
        for k in 0..4 {
            let config = SynthConfig {
                fps: 12_000.0,
                family,
                ..SynthConfig::default()
            };
            let name = format!("lab-{i}-{k}");
            let trial = synth::generate(&name, TrialKind::Normal, &config, &rig, 90 + k);
            synth::write_trial(dir.path(), &trial).unwrap();
        }
    }
    let m = measure_like(dir.path(), &rig).unwrap();
    assert_eq!(m.trials_read, 8);
    // Half the trials ring faster than they release; half print stamps coarser than a frame
    // (5 digits past 1 s: 0.1 ms against 0.083 ms).
    let shares = &m.shares;
    assert!(shares.fast_ringing.is_some_and(|s| s >= 0.35), "{m:?}");
    assert!(shares.rounded_stamps.is_some_and(|s| s >= 0.35), "{m:?}");
    let shaped = ValidateConfig::default().shaped_like(&m);
    let weight = |f: Family| {
        shaped
            .families
            .iter()
            .find(|(g, _)| *g == f)
            .map_or(0.0, |w| w.1)
    };
    assert!(weight(Family::FastRinging) > weight(Family::Classic));
    assert!(weight(Family::RoundedLong) > weight(Family::Classic));
}

#[test]
fn validate_video_scores_rendered_trials_within_loose_bounds_of_the_targets() {
    // Two trials per scene (30 and 3 degrees, with and without the 100 Hz lamp) at 1000 fps.
    // On 8 trials the bounds are loose: the targets are medians of 0.3 frame and
    // shares of 90 % (frequency) and 80 % (loading); `calibration/README.md` gives the run on
    // 40 trials. A release or peak pooled median above 0.5 frame, or more than one of the 8
    // wrong on frequency or loading, fails here.
    let tmp = tempfile::tempdir().unwrap();
    let out = common::bin()
        .env("TMPDIR", tmp.path())
        .args([
            "validate",
            "--count",
            "2",
            "--family",
            "classic",
            "--video",
            "--video-count",
            "8",
            "--fps",
            "1000",
            "--format",
            "json",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let video = &report["video"];
    assert_eq!(video["trials"], 8, "{video}");
    let scenes = video["scenes"].as_array().unwrap();
    let names: Vec<&str> = scenes
        .iter()
        .map(|s| s["scene"].as_str().unwrap())
        .collect();
    assert_eq!(
        names,
        [
            "30 deg, no lamp",
            "30 deg, 100 Hz lamp",
            "3 deg, no lamp",
            "3 deg, 100 Hz lamp",
            "all"
        ]
    );
    let all = &scenes[4];
    assert_eq!(all["trials"], 8, "{all}");
    assert_eq!(all["errors"], 0, "{all}");
    for event in ["release", "motion_peak"] {
        let e = &all[event];
        assert_eq!(e["n"], 8, "{event}: {e}");
        assert_eq!(e["misses"], 0, "{event}: {e}");
        let median = e["median_abs_error_frames"].as_f64().unwrap();
        assert!(median <= 0.5, "{event}: {e}");
    }
    for share in ["loading_within_5_ms", "frequency_within_3_pct"] {
        let s = &all[share];
        assert_eq!(s["n"], 8, "{share}: {s}");
        assert!(s["ok"].as_u64().unwrap() >= 7, "{share}: {s}");
    }
    let targets = video["targets"].as_array().unwrap();
    assert_eq!(targets.len(), 4, "{video}");
    // The frames went into a folder under TMPDIR, removed afterwards.
    let left: Vec<_> = std::fs::read_dir(tmp.path()).unwrap().collect();
    assert!(left.is_empty(), "{left:?}");
}
