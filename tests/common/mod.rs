//! Helpers shared by the integration tests.
#![allow(dead_code)] // Each test binary uses a different subset of these helpers.

use std::path::{Path, PathBuf};

use serde_json::Value;

pub mod wav_builder;

pub fn bin() -> assert_cmd::Command {
    assert_cmd::Command::cargo_bin("latchtime").expect("binary is built by cargo test")
}

pub fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Runs `batch INPUT --out OUT --quiet --rig calibration/demo-rig.json EXTRA..` from the
/// repository root and asserts it succeeded.
pub fn sample_batch(input: &str, out: &Path, extra: &[&str]) {
    bin()
        .current_dir(repo())
        .args([
            "batch",
            input,
            "--quiet",
            "--rig",
            "calibration/demo-rig.json",
        ])
        .args(extra)
        .arg("--out")
        .arg(out)
        .assert()
        .success();
}

/// Runs `batch INPUT --out OUT --quiet EXTRA..` and asserts it succeeded.
pub fn quiet_batch(input: &Path, out: &Path, extra: &[&str]) {
    bin()
        .arg("batch")
        .arg(input)
        .arg("--out")
        .arg(out)
        .arg("--quiet")
        .args(extra)
        .assert()
        .success();
}

/// Runs `batch INPUT --out OUT EXTRA..`.
pub fn batch_output(input: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    bin()
        .arg("batch")
        .arg(input)
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .unwrap()
}

/// Runs `batch INPUT --out OUT EXTRA..`, asserts it succeeded and returns its messages.
pub fn batch_messages(input: &Path, out: &Path, extra: &[&str]) -> String {
    let o = batch_output(input, out, extra);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stderr).into_owned()
}

pub fn read_json(path: &Path) -> Value {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// Tolerances of the first-pass detectors on synthetic trials.
pub struct Tolerance {
    /// Click onset, seconds.
    pub click_s: f64,
    /// Video events, in frame periods.
    pub video_frames: f64,
    /// loading_ms and release_ms, relative.
    pub duration_rel: f64,
}

/// Compares a record with its truth file; returns the list of disagreements.
pub fn compare(record: &Value, truth: &Value, tol: &Tolerance) -> Vec<String> {
    let mut problems = Vec::new();
    let name = truth["trial"].as_str().unwrap_or("?");
    let sorted_flags = |v: &Value| {
        let mut f: Vec<String> = v["flags"]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter_map(|f| f.as_str().map(str::to_string))
                    .collect()
            })
            .unwrap_or_default();
        f.sort();
        f
    };
    let (flags, want) = (sorted_flags(record), sorted_flags(truth));
    if flags != want {
        problems.push(format!("{name}: flags {flags:?}, truth {want:?}"));
    }
    let fps = truth["video_fps"].as_f64().unwrap_or(1000.0);
    let mut close =
        |field: &str, tol_abs: f64| match (record[field].as_f64(), truth[field].as_f64()) {
            (Some(r), Some(t)) if (r - t).abs() > tol_abs => problems.push(format!(
                "{name}: {field} {r} vs truth {t} (tolerance {tol_abs})"
            )),
            (None, Some(t)) => problems.push(format!("{name}: {field} missing, truth {t}")),
            (Some(r), None) => problems.push(format!("{name}: {field} {r}, truth null")),
            _ => {}
        };
    close("click_onset_s", tol.click_s);
    // Loading onsets are limited by the drift's size against the noise, not by the frame rate:
    // within twice the reported 95 % half-width, or the frame tolerance if that is larger.
    let loading_unc_s = record["loading_onset_sd_ms"].as_f64().unwrap_or(0.0) * 1.96 * 1e-3;
    close(
        "loading_onset_s",
        (tol.video_frames / fps).max(2.0 * loading_unc_s),
    );
    close("latch_release_s", tol.video_frames / fps);
    close("motion_peak_s", tol.video_frames / fps);
    for field in ["loading_ms", "release_ms"] {
        if let (Some(r), Some(t)) = (record[field].as_f64(), truth[field].as_f64()) {
            if ((r - t) / t).abs() > tol.duration_rel {
                problems.push(format!("{name}: {field} {r} vs truth {t}"));
            }
        }
    }
    problems
}

/// Every frame of a video, through the streaming reader.
pub fn read_all_frames(
    path: &Path,
) -> Result<Vec<latchtime::decode::video::Frame>, latchtime::error::Error> {
    let mut source = latchtime::decode::video::open(path)?;
    let mut out = Vec::new();
    while let Some(f) = source.next_frame()? {
        out.push(f);
    }
    Ok(out)
}
