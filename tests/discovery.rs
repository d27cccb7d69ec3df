//! Discovery as a new user meets it: what is not a trial is said, never silently dropped, and
//! nothing named like an input can hang a batch or fill memory.

mod common;

use std::path::Path;
use std::process::Output;
use std::time::{Duration, Instant};

use common::{bin, read_json};

/// Runs `batch INPUT --out OUT EXTRA..`, failing the test if it takes over a minute (a read
/// that blocks would hang the batch for ever).
fn batch_within_a_minute(input: &Path, out: &Path, extra: &[&str]) -> Output {
    let exe = assert_cmd::cargo::cargo_bin("latchtime");
    let mut child = std::process::Command::new(exe)
        .arg("batch")
        .arg(input)
        .arg("--out")
        .arg(out)
        .args(extra)
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let start = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if start.elapsed() > Duration::from_secs(60) {
            let _ = child.kill();
            panic!("batch over {} still running after 60 s", input.display());
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    child.wait_with_output().unwrap()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn synth(dir: &Path, count: usize) {
    bin()
        .args(["synth", "--kind", "normal", "--count"])
        .arg(count.to_string())
        .arg("--out")
        .arg(dir)
        .assert()
        .success();
}

fn mkfifo(path: &Path) {
    let ok = std::process::Command::new("mkfifo")
        .arg(path)
        .status()
        .is_ok_and(|s| s.success());
    assert!(ok, "mkfifo {}", path.display());
}

#[test]
fn non_regular_files_named_like_inputs_are_error_records_at_once() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data, 1);
    mkfifo(&data.join("pipe.wav"));
    std::fs::create_dir(data.join("folder.wav")).unwrap();
    std::os::unix::fs::symlink("/dev/zero", data.join("zeros.flac")).unwrap();
    // A sparse file over the 4 GiB input limit: refused by its size, never read.
    let huge = std::fs::File::create(data.join("huge.wav")).unwrap();
    huge.set_len(5 << 30).unwrap();
    let out = dir.path().join("out");
    let o = batch_within_a_minute(&data, &out, &["--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    for (trial, why) in [
        ("pipe", "a FIFO (named pipe), not a regular file"),
        ("folder", "a folder, not a regular file"),
        ("zeros", "a device, not a regular file"),
        ("huge", "larger than the input limit of 4096 MiB"),
    ] {
        let r = read_json(&out.join(format!("trials/{trial}.json")));
        assert_eq!(r["status"], "error", "{trial}");
        let message = r["error"].as_str().unwrap();
        assert!(
            message.contains(trial) && message.contains(why),
            "{trial}: {message}"
        );
    }
    assert_eq!(
        read_json(&out.join("trials/synth-0001-normal.json"))["status"],
        "ok"
    );
    // The same through a manifest, which names the paths directly.
    let manifest = data.join("m.csv");
    std::fs::write(
        &manifest,
        "trial,audio,frames,group\npiped,pipe.wav,,\nzero,/dev/zero,,\n",
    )
    .unwrap();
    let out = dir.path().join("out-manifest");
    let o = batch_within_a_minute(&manifest, &out, &["--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    for trial in ["piped", "zero"] {
        let r = read_json(&out.join(format!("trials/{trial}.json")));
        assert!(
            r["error"].as_str().unwrap().contains("not a regular file"),
            "{r}"
        );
    }
}

#[test]
fn frames_named_almost_right_are_warned_about_and_strict_refuses_them() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data, 2);
    let name = "synth-0001-normal";
    std::fs::rename(
        data.join(format!("{name}.frames.csv")),
        data.join(format!("{name}.csv")),
    )
    .unwrap();
    let other = "synth-0002-normal";
    std::fs::rename(
        data.join(format!("{other}.frames.csv")),
        data.join(format!("{other}.Frames.CSV")),
    )
    .unwrap();
    let out = dir.path().join("out");
    let o = batch_within_a_minute(&data, &out, &["--quiet"]);
    assert!(o.status.success());
    let err = stderr(&o);
    for (file, trial) in [
        (format!("{name}.csv"), name),
        (format!("{other}.Frames.CSV"), other),
    ] {
        assert!(
            err.contains(&format!("{file}: not read as the frames of trial {trial}"))
                && err.contains(&format!("{trial}.frames.csv")),
            "{err}"
        );
    }
    let strict_out = dir.path().join("strict");
    let o = batch_within_a_minute(&data, &strict_out, &["--quiet", "--strict"]);
    assert_eq!(o.status.code(), Some(4), "{}", stderr(&o));
    assert!(!strict_out.exists(), "--strict wrote before refusing");
}

#[test]
fn audio_in_subfolders_is_warned_about_and_recursive_takes_it() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data.join("2026-03-01"), 2);
    synth(&data.join("2026-03-02"), 1);
    synth(&data, 1);
    // The results folder inside the input folder is never searched.
    let out = data.join("results");
    let o = batch_within_a_minute(&data, &out, &["--quiet"]);
    assert!(o.status.success());
    let err = stderr(&o);
    assert!(
        err.contains("6 audio or frames files in subfolders (2026-03-01/, 2026-03-02/)")
            && err.contains("--recursive"),
        "{err}"
    );
    let o = batch_within_a_minute(&data, &out, &["--quiet", "--recursive"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!stderr(&o).contains("subfolders"), "{}", stderr(&o));
    let summary = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    let names: Vec<&str> = summary
        .lines()
        .skip(1)
        .map(|l| l.split(',').next().unwrap())
        .collect();
    assert_eq!(
        names,
        [
            "2026-03-01/synth-0001-normal",
            "2026-03-01/synth-0002-normal",
            "2026-03-02/synth-0001-normal",
            "synth-0001-normal"
        ]
    );
    let r = read_json(&out.join("trials/2026-03-02%2Fsynth-0001-normal.json"));
    assert_eq!(r["trial"], "2026-03-02/synth-0001-normal");
    assert_eq!(r["status"], "ok");
}

#[test]
fn a_folder_without_trials_is_warned_about_and_leaves_the_results_alone() {
    let dir = tempfile::tempdir().unwrap();
    let empty = dir.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    std::fs::write(empty.join("notes.txt"), b"no trials today").unwrap();
    let out = dir.path().join("out");
    let o = batch_within_a_minute(&empty, &out, &[]);
    assert!(o.status.success());
    assert!(stderr(&o).contains("no trials found"), "{}", stderr(&o));
    assert!(!out.exists());
    let o = batch_within_a_minute(&empty, &out, &["--strict"]);
    assert_eq!(o.status.code(), Some(4));
}

#[test]
fn an_mp4_with_a_video_track_is_the_trials_video_and_an_audio_only_mp4_stays_audio() {
    let dir = tempfile::tempdir().unwrap();
    let data = common::repo().join("tests/data");
    let h264 = data.join("video/h264/bar-64x48-40frames-240fps-x264-baseline.mp4");
    std::fs::copy(
        data.join("click-48kHz-16bit-mono.wav"),
        dir.path().join("t1.wav"),
    )
    .unwrap();
    std::fs::copy(&h264, dir.path().join("t1.mp4")).unwrap();
    // AAC in MP4 (ffmpeg's .m4a, renamed): no video track.
    std::fs::copy(
        data.join("click-48kHz-mono-ffmpeg-aac.m4a"),
        dir.path().join("t2.mp4"),
    )
    .unwrap();
    std::fs::copy(&h264, dir.path().join("t3.MOV")).unwrap();
    let trials = latchtime::batch::discover::discover(dir.path()).unwrap();
    let names = |f: fn(&latchtime::pipeline::TrialSpec) -> Option<&Path>| -> Vec<Option<String>> {
        trials
            .iter()
            .map(|t| f(&t.spec).map(|p| p.file_name().unwrap().to_string_lossy().into_owned()))
            .collect()
    };
    assert_eq!(trials.len(), 3);
    assert_eq!(
        names(|s| s.audio.as_deref()),
        [Some("t1.wav".into()), Some("t2.mp4".into()), None]
    );
    assert_eq!(
        names(|s| s.video.as_deref()),
        [Some("t1.mp4".into()), None, Some("t3.MOV".into())]
    );
    assert!(trials.iter().all(|t| t.problem.is_none()));
}
