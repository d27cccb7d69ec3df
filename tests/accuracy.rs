//! Accuracy against synthetic trials with known truth, over sample rates 44.1-250 kHz, frame
//! rates 500-5000 fps, every kind of trial, mono and stereo, integer and float WAV. Tolerances
//! are the first-pass promises: click onset 0.05 ms (two samples at 44.1 kHz: the AIC picker is
//! exact to a sample or two on a clean onset), video events 2 frame periods, durations 10 %,
//! oscillation amplitude ratio 0.03 and frequency 2 %.

mod common;

use common::{compare, Tolerance};
use latchtime::pipeline::{analyze_files, Scratch, TrialSpec};
use latchtime::synth::{self, SampleEncoding, SynthConfig, TrialKind};
use latchtime::RigProfile;

fn configs() -> Vec<SynthConfig> {
    let base = SynthConfig::default();
    vec![
        SynthConfig {
            sample_rate_hz: 44_100,
            fps: 500.0,
            ..base.clone()
        },
        SynthConfig {
            sample_rate_hz: 48_000,
            fps: 1000.0,
            hum_hz: 60.0,
            ..base.clone()
        },
        SynthConfig {
            sample_rate_hz: 96_000,
            fps: 2000.0,
            channels: 2,
            ..base.clone()
        },
        SynthConfig {
            sample_rate_hz: 192_000,
            fps: 1000.0,
            encoding: SampleEncoding::Int24,
            ..base.clone()
        },
        SynthConfig {
            sample_rate_hz: 250_000,
            fps: 5000.0,
            encoding: SampleEncoding::Float32,
            duration_s: 0.3,
            ..base.clone()
        },
    ]
}

#[test]
fn synthetic_trials_are_measured_within_first_pass_tolerances() {
    let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let tol = Tolerance {
        click_s: 0.05e-3,
        video_frames: 2.0,
        duration_rel: 0.10,
    };
    let mut scratch = Scratch::default();
    let mut problems = Vec::new();
    let mut checked = 0;
    for (c, config) in configs().iter().enumerate() {
        for (k, kind) in TrialKind::ALL.iter().enumerate() {
            for rep in 0..2u64 {
                let name = format!("acc-{c}-{}-{rep}", kind.as_str());
                let seed = 1000 * c as u64 + 10 * k as u64 + rep;
                let trial = synth::generate(&name, *kind, config, &rig, seed);
                synth::write_trial(dir.path(), &trial).unwrap();
                let spec = TrialSpec {
                    name: name.clone(),
                    group: None,
                    audio: Some(dir.path().join(format!("{name}.wav"))),
                    frames: Some(dir.path().join(format!("{name}.frames.csv"))),
                    video: None,
                };
                let record = analyze_files(&spec, &rig, &mut scratch);
                let record = serde_json::to_value(&record).unwrap();
                let truth = serde_json::to_value(&trial.truth).unwrap();
                problems.extend(compare(&record, &truth, &tol));
                if let (Some(r), Some(t)) = (
                    record["oscillation"].as_object(),
                    truth["oscillation"].as_object(),
                ) {
                    let (ra, ta) = (
                        r["amplitude_ratio"].as_f64().unwrap(),
                        t["amplitude_ratio"].as_f64().unwrap(),
                    );
                    let (rf, tf) = (
                        r["frequency_hz"].as_f64().unwrap(),
                        t["frequency_hz"].as_f64().unwrap(),
                    );
                    if (ra - ta).abs() > 0.05 || (rf / tf - 1.0).abs() > 0.02 {
                        problems.push(format!(
                            "{name}: oscillation ratio {ra} vs {ta}, f {rf} vs {tf}"
                        ));
                    }
                } else if truth["oscillation"].is_object() {
                    problems.push(format!("{name}: oscillation missing"));
                }
                checked += 1;
            }
        }
    }
    assert_eq!(checked, 60);
    assert!(
        problems.is_empty(),
        "{} problems:\n{}",
        problems.len(),
        problems.join("\n")
    );
}

#[test]
fn a_separate_loading_column_is_used_for_loading_onset() {
    let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let trial = synth::generate("sep", TrialKind::Normal, &SynthConfig::default(), &rig, 77);
    let frames = trial.frames.as_ref().unwrap();
    let onset = trial.truth.loading_onset_s.unwrap();
    let release = trial.truth.latch_release_s.unwrap();
    // The motion column has no loading drift at all; the spring column has only the loading.
    let mut text = String::from("time_s,angle_deg,spring_px\n");
    for (_, t, y) in frames {
        let spring = if *t < onset {
            10.0
        } else if *t < release {
            10.0 + 200.0 * (t - onset)
        } else {
            10.0
        };
        let angle = if *t < release { 0.0 } else { *y };
        text.push_str(&format!("{t:.7},{angle:.3},{spring:.4}\n"));
    }
    let path = dir.path().join("sep.frames.csv");
    std::fs::write(&path, text).unwrap();
    let spec = TrialSpec {
        name: "sep".into(),
        group: None,
        audio: None,
        frames: Some(path),
        video: None,
    };
    let with_column = RigProfile {
        loading_column: Some("spring_px".into()),
        ..rig.clone()
    };
    let record = analyze_files(&spec, &with_column, &mut Scratch::default());
    let found = record
        .loading_onset_s
        .expect("loading onset from spring_px");
    assert!((found - onset).abs() < 2e-3, "{found} vs {onset}");
    let without = analyze_files(&spec, &rig, &mut Scratch::default());
    assert!(without.flags.contains(&latchtime::Flag::NoLoading));
}
