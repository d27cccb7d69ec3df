//! The binary as a user runs it: the README's main command on the shipped sample data, the
//! `trial` command, resume, exit codes.

mod common;

use std::path::Path;

use common::{batch_messages, bin, compare, read_json, repo, Tolerance};

/// First-pass tolerances promised for the sample data: click onsets within 0.2 ms, video
/// events within 2 frame periods, loading_ms and release_ms within 10 %.
const SAMPLE_TOLERANCE: Tolerance = Tolerance {
    click_s: 0.2e-3,
    video_frames: 2.0,
    duration_rel: 0.10,
};

fn run_sample_batch(out: &Path) {
    common::sample_batch("sample-audio/manifest.csv", out, &[]);
}

#[test]
fn sample_batch_meets_first_pass_tolerances_and_flags_every_special_trial() {
    let dir = tempfile::tempdir().unwrap();
    run_sample_batch(dir.path());
    let sample = repo().join("sample-audio");
    let mut truths: Vec<_> = std::fs::read_dir(&sample)
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.to_string_lossy().ends_with(".truth.json"))
        .collect();
    truths.sort();
    assert!(
        truths.len() >= 12,
        "sample-audio holds {} trials",
        truths.len()
    );
    let mut problems = Vec::new();
    for t in &truths {
        let truth = read_json(t);
        let name = truth["trial"].as_str().unwrap();
        let record = read_json(&dir.path().join("trials").join(format!("{name}.json")));
        problems.extend(compare(&record, &truth, &SAMPLE_TOLERANCE));
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));
    let summary = std::fs::read_to_string(dir.path().join("summary.csv")).unwrap();
    assert_eq!(summary.lines().count(), truths.len() + 1);
    for kind_flag in [
        "double_click",
        "no_click;no_release",
        "clipped",
        "sync_mismatch",
        "frame_gaps",
    ] {
        assert!(summary.contains(kind_flag), "summary lacks {kind_flag}");
    }
}

#[test]
fn second_run_reuses_every_record_and_a_changed_input_recomputes_only_its_trial() {
    let data = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    bin()
        .args(["synth", "--count", "4", "--seed", "5", "--out"])
        .arg(data.path())
        .assert()
        .success();
    let run = || batch_messages(data.path(), out.path(), &[]);
    assert!(run().contains("(4 analysed, 0 current records reused)"));
    assert!(run().contains("(0 analysed, 4 current records reused)"));
    let victim = std::fs::read_dir(data.path())
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .find(|p| p.to_string_lossy().ends_with(".frames.csv"))
        .unwrap();
    // Change the first frame's value in its last decimal: new content, same meaning nearly.
    let text = std::fs::read_to_string(&victim).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    lines[1].push('1');
    std::fs::write(&victim, lines.join("\n") + "\n").unwrap();
    assert!(run().contains("(1 analysed, 3 current records reused)"));
}

#[test]
fn trial_command_prints_json_record_and_text_summary() {
    let out = bin()
        .current_dir(repo())
        .args([
            "trial",
            "--audio",
            "sample-audio/ls2-thin-01.wav",
            "--frames",
            "sample-audio/ls2-thin-01.frames.csv",
            "--rig",
            "calibration/demo-rig.json",
            "--format",
            "json",
        ])
        .output()
        .unwrap();
    assert!(out.status.success());
    let record: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(record["trial"], "ls2-thin-01");
    assert_eq!(record["status"], "ok");
    assert!(record["amplification"].as_f64().unwrap() > 1.0);
    let text = bin()
        .current_dir(repo())
        .args(["trial", "--frames", "sample-audio/ls2-thin-05.frames.csv"])
        .output()
        .unwrap();
    assert!(text.status.success());
    let text = String::from_utf8(text.stdout).unwrap();
    assert!(
        text.contains("latch release") && text.contains("ls2-thin-05"),
        "{text}"
    );
}

#[test]
fn usage_errors_exit_2_and_unwritable_output_exits_3() {
    bin().args(["trial"]).assert().code(2);
    bin()
        .args(["batch", "/nonexistent/folder", "--out", "/tmp/x"])
        .assert()
        .code(2);
    let dir = tempfile::tempdir().unwrap();
    let rig = dir.path().join("rig.json");
    std::fs::write(&rig, r#"{"fps": 1000, "mic_distnce_m": 0.3}"#).unwrap();
    let out = bin()
        .current_dir(repo())
        .args(["batch", "sample-audio", "--out"])
        .arg(dir.path().join("o"))
        .arg("--rig")
        .arg(&rig)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("mic_distnce_m") && err.contains("rig.json"),
        "{err}"
    );
    let file = dir.path().join("a-file");
    std::fs::write(&file, "x").unwrap();
    bin()
        .current_dir(repo())
        .args(["batch", "sample-audio", "--quiet", "--out"])
        .arg(&file)
        .assert()
        .code(3);
}

#[test]
fn strict_mode_exits_4_when_a_trial_failed() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("broken.wav"), b"").unwrap();
    let out = dir.path().join("out");
    bin()
        .arg("batch")
        .arg(dir.path())
        .arg("--out")
        .arg(&out)
        .arg("--quiet")
        .assert()
        .success();
    bin()
        .arg("batch")
        .arg(dir.path())
        .arg("--out")
        .arg(&out)
        .args(["--quiet", "--strict"])
        .assert()
        .code(4);
}

#[test]
fn folder_discovery_pairs_audio_with_frames_and_keeps_lone_streams() {
    let out = tempfile::tempdir().unwrap();
    common::sample_batch("sample-audio", out.path(), &[]);
    let video_only = read_json(&out.path().join("trials/ls2-thin-05.json"));
    assert!(video_only["audio_file"].is_null() && video_only["latch_release_s"].is_number());
    let audio_only = read_json(&out.path().join("trials/ls2-thick-04.json"));
    assert!(audio_only["frames_file"].is_null() && audio_only["click_onset_s"].is_number());
    assert!(audio_only["latch_release_s"].is_null());
    let count = std::fs::read_dir(out.path().join("trials"))
        .unwrap()
        .count();
    assert_eq!(count, 14);
}

#[test]
fn shipped_sample_data_is_exactly_what_synth_demo_writes() {
    let dir = tempfile::tempdir().unwrap();
    bin()
        .args(["synth", "--demo", "--out"])
        .arg(dir.path())
        .assert()
        .success();
    let shipped = repo().join("sample-audio");
    let mut count = 0;
    for entry in std::fs::read_dir(dir.path()).unwrap().flatten() {
        let name = entry.file_name();
        let made = std::fs::read(entry.path()).unwrap();
        let kept = std::fs::read(shipped.join(&name)).unwrap_or_default();
        assert!(
            made == kept,
            "sample-audio/{} differs from `synth --demo`",
            name.to_string_lossy()
        );
        count += 1;
    }
    assert!(count >= 40);
    let rig = latchtime::RigProfile::from_path(&repo().join("calibration/demo-rig.json")).unwrap();
    assert_eq!(
        rig,
        latchtime::RigProfile::from_json(latchtime::synth::DEMO_RIG_JSON).unwrap()
    );
}

#[test]
fn validate_saves_the_trials_that_disagree_and_refuses_a_folder_in_use() {
    let dir = tempfile::tempdir().unwrap();
    let keep = dir.path().join("disagreeing");
    let keep_arg = keep.to_string_lossy().into_owned();
    let rig = repo().join("calibration/demo-rig.json");
    let rig_arg = rig.to_string_lossy().into_owned();
    // Clicks at 8-10 dB are often missed at 48 kHz, so some of 40 trials disagree.
    let args = [
        "validate",
        "--rig",
        &rig_arg,
        "--count",
        "40",
        "--sample-rate-hz",
        "48000",
        "--fps",
        "500",
        "--snr-db",
        "8:10",
        "--format",
        "json",
        "--save-disagreements",
        &keep_arg,
    ];
    let out = bin()
        .args(args)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let report: serde_json::Value = serde_json::from_slice(&out).unwrap();
    let names: Vec<&str> = report["disagreements"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| d["trial"].as_str().unwrap())
        .collect();
    assert!(!names.is_empty());
    for name in &names {
        let truth = read_json(&keep.join(format!("{name}.truth.json")));
        assert_eq!(truth["trial"], *name);
        assert!(keep.join(format!("{name}.wav")).is_file());
        assert!(keep.join(format!("{name}.frames.csv")).is_file());
    }
    let files = std::fs::read_dir(&keep).unwrap().count();
    assert_eq!(files, 3 * names.len());
    // Running again into the same folder would mix two runs: refused as a usage error.
    bin().args(args).assert().code(2);
}

#[test]
fn a_reader_that_closes_the_pipe_early_is_no_panic() {
    // `latchtime validate ... | head -1`: the reader goes away before the output is written.
    let exe = assert_cmd::cargo::cargo_bin("latchtime");
    let mut child = std::process::Command::new(exe)
        .args(["validate", "--count", "2", "--format", "json"])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    drop(child.stdout.take());
    let out = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(!err.contains("panicked"), "{err}");
    assert!(out.status.success(), "{:?} {err}", out.status);
}
