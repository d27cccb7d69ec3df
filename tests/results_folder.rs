//! The results folder is the campaign: one writer at a time, current records only, nothing
//! outside it written. Each test runs the binary as a user would and checks one promise of the
//! README's Campaigns section.

mod common;

use std::path::{Path, PathBuf};
use std::process::Output;

use common::{batch_output as batch, bin, read_json};
use latchtime::batch::lock::{self, Scope};

/// Writes `count` short synthetic trials of one kind into `dir`.
fn synth(dir: &Path, count: usize, kind: &str) {
    bin()
        .args(["synth", "--seed", "4", "--kind", kind, "--count"])
        .arg(count.to_string())
        .arg("--out")
        .arg(dir)
        .assert()
        .success();
}

/// A temporary folder with `count` normal trials in `in/`, and the path `out/` for results.
fn campaign(count: usize) -> (tempfile::TempDir, PathBuf, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data, count, "normal");
    let out = dir.path().join("out");
    (dir, data, out)
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Writes a manifest `m.csv` in `dir` naming trials `synth-000I-normal` with their groups.
fn manifest(dir: &Path, rows: &[(usize, &str)]) -> PathBuf {
    let mut text = String::from("trial,audio,frames,group\n");
    for (i, group) in rows {
        let name = format!("synth-{i:04}-normal");
        text.push_str(&format!("{name},{name}.wav,{name}.frames.csv,{group}\n"));
    }
    let path = dir.join("m.csv");
    std::fs::write(&path, text).unwrap();
    path
}

fn summary_names(out: &Path) -> Vec<String> {
    std::fs::read_to_string(out.join("summary.csv"))
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| l.split(',').next().unwrap().to_string())
        .collect()
}

#[test]
fn a_second_run_is_refused_while_the_folder_is_held_and_an_ended_holders_lock_is_taken_over() {
    let (_dir, data, out) = campaign(2);
    std::fs::create_dir_all(&out).unwrap();
    // This test process holds the folder as a running batch would.
    let held = match lock::acquire(&out, Scope::Whole, "batch").unwrap() {
        lock::Acquired::Locked { lock, .. } => lock,
        lock::Acquired::Busy(h) => panic!("busy: {h:?}"),
    };
    for extra in [&["--quiet"][..], &["--quiet", "--shard", "1/2"][..]] {
        let o = batch(&data, &out, extra);
        assert_eq!(o.status.code(), Some(6), "{}", stderr(&o));
        let err = stderr(&o);
        let pid = format!("pid {}", std::process::id());
        assert!(err.contains("in use") && err.contains(&pid), "{err}");
    }
    let o = bin().arg("summarize").arg(&out).output().unwrap();
    assert_eq!(o.status.code(), Some(2), "no trials/ yet: {}", stderr(&o));
    assert!(!out.join("trials").exists(), "a refused run wrote records");
    drop(held);
    assert!(batch(&data, &out, &["--quiet"]).status.success());

    // A lock file left by a run that ended without releasing it (killed, crashed, host
    // rebooted) holds no system lock: the next run takes it over and says whose it was.
    let ghost =
        r#"{"pid":999999,"host":"bench-7","command":"batch","since":"2026-01-01T00:00:00Z"}"#;
    std::fs::write(out.join(".latchtime.lock"), ghost).unwrap();
    let o = batch(&data, &out, &["--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let err = stderr(&o);
    assert!(
        err.contains("took over") && err.contains("999999") && err.contains("bench-7"),
        "{err}"
    );
    assert!(!out.join(".latchtime.lock").exists(), "lock file left");
}

#[test]
fn shards_of_one_campaign_run_side_by_side_and_the_last_writes_the_tables() {
    let (_dir, data, out) = campaign(12);
    let exe = assert_cmd::cargo::cargo_bin("latchtime");
    let children: Vec<_> = ["1/2", "2/2"]
        .iter()
        .map(|s| {
            std::process::Command::new(&exe)
                .arg("batch")
                .arg(&data)
                .arg("--out")
                .arg(&out)
                .args(["--quiet", "--jobs", "1", "--shard", s])
                .stderr(std::process::Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    for child in children {
        let o = child.wait_with_output().unwrap();
        assert!(o.status.success(), "{}", stderr(&o));
    }
    assert_eq!(summary_names(&out).len(), 12);
    for s in ["run.shard-1-of-2.json", "run.shard-2-of-2.json"] {
        let run = read_json(&out.join(s));
        assert!(run["finished"].is_string(), "{s}");
        assert_eq!(run["trials"].as_array().unwrap().len(), 12);
    }
    let left: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(".latchtime.lock"))
        .collect();
    // Only the tables lock may stay (a whole-folder run removes it).
    assert!(
        left.iter().all(|n| n == ".latchtime.lock.tables"),
        "{left:?}"
    );
}

#[test]
fn a_symlink_planted_in_the_results_folder_is_never_followed() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data, 2, "normal");
    let outside = dir.path().join("outside.txt");
    std::fs::write(&outside, b"precious").unwrap();
    let out = dir.path().join("out");
    std::fs::create_dir_all(out.join("trials")).unwrap();
    let plant = |at: PathBuf| std::os::unix::fs::symlink(&outside, at).unwrap();
    plant(out.join("trials/synth-0001-normal.json"));
    plant(out.join("summary.csv"));
    plant(out.join("run.json"));
    let o = batch(&data, &out, &["--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(std::fs::read(&outside).unwrap(), b"precious");
    for written in ["trials/synth-0001-normal.json", "summary.csv", "run.json"] {
        let meta = std::fs::symlink_metadata(out.join(written)).unwrap();
        assert!(meta.is_file(), "{written} is still a link");
    }
    // A link at the lock's name is refused, not written through.
    let locked_out = dir.path().join("out2");
    std::fs::create_dir_all(&locked_out).unwrap();
    plant(locked_out.join(".latchtime.lock"));
    let o = batch(&data, &locked_out, &["--quiet"]);
    assert_eq!(o.status.code(), Some(3), "{}", stderr(&o));
    assert_eq!(std::fs::read(&outside).unwrap(), b"precious");
    // trials/ as a link to a folder outside is refused, and that folder stays empty.
    let elsewhere = dir.path().join("elsewhere");
    std::fs::create_dir_all(&elsewhere).unwrap();
    let linked_out = dir.path().join("out3");
    std::fs::create_dir_all(&linked_out).unwrap();
    std::os::unix::fs::symlink(&elsewhere, linked_out.join("trials")).unwrap();
    let o = batch(&data, &linked_out, &["--quiet"]);
    assert_eq!(o.status.code(), Some(3), "{}", stderr(&o));
    assert!(stderr(&o).contains("symbolic link"), "{}", stderr(&o));
    assert_eq!(std::fs::read_dir(&elsewhere).unwrap().count(), 0);
}

#[test]
fn leftover_temporary_files_of_a_killed_run_are_removed_at_start() {
    let (_dir, data, out) = campaign(2);
    assert!(batch(&data, &out, &["--quiet", "--report"])
        .status
        .success());
    let leftovers = [
        "trials/.latchtime-tmp-0123456789abcdef-synth-0001-normal.json",
        "trials/.latchtime-tmp-4242-7-synth-0002-normal.json",
        ".latchtime-tmp-fedcba9876543210-summary.csv",
        ".latchtime-tmp-fedcba9876543211-groups.csv",
        "plots/.latchtime-tmp-0000000000000001-synth-0001-normal.svg",
    ];
    for l in leftovers {
        std::fs::write(out.join(l), b"partial").unwrap();
    }
    assert!(batch(&data, &out, &["--quiet"]).status.success());
    for l in leftovers {
        assert!(!out.join(l).exists(), "{l} left");
    }
}

#[test]
fn records_of_trials_no_longer_in_the_campaign_are_moved_aside_and_named() {
    let (_dir, data, out) = campaign(3);
    let m = manifest(&data, &[(1, "g"), (2, "g"), (3, "g")]);
    assert!(batch(&m, &out, &["--quiet"]).status.success());
    let m = manifest(&data, &[(1, "g"), (3, "g")]);
    let o = batch(&m, &out, &["--quiet"]);
    assert!(o.status.success());
    assert!(
        stderr(&o).contains("synth-0002-normal.json") && stderr(&o).contains("stale"),
        "{}",
        stderr(&o)
    );
    assert!(out.join("trials/stale/synth-0002-normal.json").is_file());
    assert!(!out.join("trials/synth-0002-normal.json").exists());
    assert_eq!(
        summary_names(&out),
        ["synth-0001-normal", "synth-0003-normal"]
    );
    let groups = std::fs::read_to_string(out.join("groups.csv")).unwrap();
    assert!(groups.contains("\n(all),trials,count,2,"), "{groups}");
    let run = read_json(&out.join("run.json"));
    assert_eq!(run["stale"][0], "synth-0002-normal.json");
    assert_eq!(run["counts"]["stale_moved"], 1);
}

#[test]
fn a_changed_group_rewrites_the_record_without_a_new_analysis() {
    let (_dir, data, out) = campaign(2);
    let m = manifest(&data, &[(1, "soft"), (2, "soft")]);
    assert!(batch(&m, &out, &[]).status.success());
    let before = read_json(&out.join("trials/synth-0001-normal.json"));
    let m = manifest(&data, &[(1, "stiff"), (2, "soft")]);
    let o = batch(&m, &out, &[]);
    assert!(o.status.success());
    let err = stderr(&o);
    assert!(
        err.contains("(0 analysed") && err.contains("1 record(s) rewritten"),
        "{err}"
    );
    let mut after = read_json(&out.join("trials/synth-0001-normal.json"));
    assert_eq!(after["group"], "stiff");
    after["group"] = before["group"].clone();
    assert_eq!(after, before, "only the group may change");
    let summary = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    assert!(summary.contains("synth-0001-normal,stiff,"), "{summary}");
    let groups = std::fs::read_to_string(out.join("groups.csv")).unwrap();
    assert!(
        groups.contains("\nsoft,trials,count,1,") && groups.contains("\nstiff,trials,count,1,"),
        "{groups}"
    );
    let run = read_json(&out.join("run.json"));
    let outcomes: Vec<&str> = run["trials"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["outcome"].as_str().unwrap())
        .collect();
    assert_eq!(outcomes, ["rewritten", "reused"]);
}

#[test]
fn an_input_unreadable_on_resume_keeps_its_good_record_and_exits_5() {
    let (_dir, data, out) = campaign(2);
    let m = manifest(&data, &[(1, "g"), (2, "g")]);
    assert!(batch(&m, &out, &["--quiet"]).status.success());
    let record = out.join("trials/synth-0002-normal.json");
    let good = std::fs::read(&record).unwrap();
    // The drive holding the audio is not mounted yet.
    let wav = data.join("synth-0002-normal.wav");
    let away = data.join("away.wav");
    std::fs::rename(&wav, &away).unwrap();
    let o = batch(&m, &out, &["--quiet"]);
    assert_eq!(o.status.code(), Some(5), "{}", stderr(&o));
    let err = stderr(&o);
    assert!(
        err.contains("synth-0002-normal") && err.contains("earlier record is kept"),
        "{err}"
    );
    assert_eq!(std::fs::read(&record).unwrap(), good);
    assert_eq!(summary_names(&out).len(), 2);
    let run = read_json(&out.join("run.json"));
    assert_eq!(run["trials"][1]["outcome"], "kept");
    std::fs::rename(&away, &wav).unwrap();
    let o = batch(&m, &out, &["--quiet"]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
}

/// A tmpfs of `size` mounted at a new folder, unmounted when dropped.
struct SmallDisk(PathBuf);

impl SmallDisk {
    fn mount(at: PathBuf, size: &str) -> Option<Self> {
        std::fs::create_dir_all(&at).ok()?;
        let ok = std::process::Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={size}"), "tmpfs"])
            .arg(&at)
            .stderr(std::process::Stdio::null())
            .status()
            .is_ok_and(|s| s.success());
        ok.then_some(SmallDisk(at))
    }

    fn grow(&self, size: &str) {
        let ok = std::process::Command::new("mount")
            .args(["-o", &format!("remount,size={size}")])
            .arg(&self.0)
            .status()
            .is_ok_and(|s| s.success());
        assert!(ok, "cannot remount the tmpfs");
    }
}

impl Drop for SmallDisk {
    fn drop(&mut self) {
        let _ = std::process::Command::new("umount").arg(&self.0).status();
    }
}

#[test]
fn a_full_disk_stops_the_run_at_the_first_failed_write_and_the_same_command_finishes_it() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data, 30, "normal");
    // Records are about 2.5 kB: a 64 kB disk fills part way through the campaign.
    let Some(disk) = SmallDisk::mount(dir.path().join("disk"), "64k") else {
        // Mounting needs root (or CAP_SYS_ADMIN); without it a read-only results folder
        // shows the first-failed-write stop, though not a disk filling part way.
        eprintln!("cannot mount a tmpfs here: simulating with a read-only folder");
        let out = dir.path().join("ro");
        std::fs::create_dir_all(out.join("trials")).unwrap();
        let mut perm = std::fs::metadata(out.join("trials")).unwrap().permissions();
        std::os::unix::fs::PermissionsExt::set_mode(&mut perm, 0o555);
        std::fs::set_permissions(out.join("trials"), perm).unwrap();
        let o = batch(&data, &out, &["--quiet"]);
        assert_eq!(o.status.code(), Some(3), "{}", stderr(&o));
        return;
    };
    let out = disk.0.join("out");
    let o = batch(&data, &out, &["--quiet", "--jobs", "2"]);
    assert_eq!(o.status.code(), Some(3), "{}", stderr(&o));
    let err = stderr(&o);
    assert_eq!(
        err.matches("No space left on device").count(),
        1,
        "the cause is named once: {err}"
    );
    let written = std::fs::read_dir(out.join("trials")).unwrap().count();
    assert!(written > 0 && written < 30, "{written} records");
    // Only the trials in flight when the write failed go on: the rest never start.
    let not_started: usize = err
        .split(" not started")
        .next()
        .and_then(|s| s.rsplit(' ').next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("no count of trials not started: {err}"));
    // At most the two trials in flight (--jobs 2) are analysed but not written.
    assert!(not_started + written + 2 >= 30, "{not_started}: {err}");
    assert!(!out.join("summary.csv").exists());
    disk.grow("4m");
    let o = batch(&data, &out, &["--quiet", "--jobs", "2"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(std::fs::read_dir(out.join("trials")).unwrap().count(), 30);
    assert_eq!(summary_names(&out).len(), 30);
}

/// Overrides that make other effective settings than the defaults.
const OTHER_SETTINGS: [&str; 4] = ["--channel", "0", "--fps", "1000"];

#[test]
fn records_of_other_settings_are_never_summarised_together() {
    let (_dir, data, out) = campaign(8);
    // Two shards started with different settings: the second finds the first's records.
    assert!(batch(&data, &out, &["--quiet", "--shard", "1/2"])
        .status
        .success());
    let o = batch(
        &data,
        &out,
        &[&["--quiet", "--shard", "2/2"][..], &OTHER_SETTINGS].concat(),
    );
    assert_eq!(o.status.code(), Some(7), "{}", stderr(&o));
    let err = stderr(&o);
    assert!(
        err.contains("not written")
            && err.contains("other settings")
            && err.contains(" of 8 records"),
        "{err}"
    );
    assert!(!out.join("summary.csv").exists());
    let o = bin().arg("summarize").arg(&out).output().unwrap();
    assert_eq!(o.status.code(), Some(7), "{}", stderr(&o));
    // Running the first shard again with the second's settings recomputes it.
    let o = batch(
        &data,
        &out,
        &[&["--quiet", "--shard", "1/2"][..], &OTHER_SETTINGS].concat(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(summary_names(&out).len(), 8);
}

/// Runs `report DIR` from the repository root, with no settings, and asserts it succeeded.
fn report(dir: &Path) {
    let o = bin()
        .current_dir(common::repo())
        .arg("report")
        .arg(dir)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
}

#[test]
fn report_draws_with_the_settings_the_batch_used_and_needs_no_rig() {
    let dir = tempfile::tempdir().unwrap();
    let with_batch = dir.path().join("a");
    let later = dir.path().join("b");
    common::sample_batch("sample-audio/manifest.csv", &with_batch, &["--report"]);
    common::sample_batch("sample-audio/manifest.csv", &later, &[]);
    report(&later);
    for f in ["plots/ls2-thin-01.svg", "plots/ls2-thick-02.svg"] {
        assert_eq!(
            std::fs::read(with_batch.join(f)).unwrap(),
            std::fs::read(later.join(f)).unwrap(),
            "{f}"
        );
    }
    // Drawn with other settings (the defaults, in a folder without its run file) the
    // figures differ: the click is placed on the video clock by the rig's offset.
    std::fs::remove_file(later.join("run.json")).unwrap();
    report(&later);
    assert_ne!(
        std::fs::read(with_batch.join("plots/ls2-thin-01.svg")).unwrap(),
        std::fs::read(later.join("plots/ls2-thin-01.svg")).unwrap()
    );
    common::sample_batch("sample-audio/manifest.csv", &later, &[]);
    // Other settings than the batch's are refused rather than drawn.
    let o = bin()
        .current_dir(common::repo())
        .arg("report")
        .arg(&later)
        .args(["--rig", "calibration/demo-rig.json"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
}

#[test]
fn every_trial_name_has_its_own_record_even_one_named_like_a_stand_in() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    synth(&data, 2, "normal");
    let stand_in = latchtime::batch::discover::record_stem("../escape");
    let manifest = data.join("m.csv");
    std::fs::write(
        &manifest,
        format!(
            "trial,audio,frames,group\n../escape,synth-0001-normal.wav,,\n{stand_in},synth-0002-normal.wav,,\nday1/t,synth-0001-normal.wav,,\nday1%2Ft,synth-0002-normal.wav,,\n"
        ),
    )
    .unwrap();
    for jobs in ["1", "2"] {
        let out = dir.path().join(format!("out{jobs}"));
        assert!(batch(&manifest, &out, &["--quiet", "--jobs", jobs])
            .status
            .success());
        let mut trials: Vec<String> = std::fs::read_dir(out.join("trials"))
            .unwrap()
            .flatten()
            .map(|e| read_json(&e.path())["trial"].as_str().unwrap().to_string())
            .collect();
        trials.sort();
        let mut want = vec![
            "../escape".to_string(),
            stand_in.clone(),
            "day1/t".into(),
            "day1%2Ft".into(),
        ];
        want.sort();
        assert_eq!(trials, want, "--jobs {jobs}");
    }
}

#[test]
fn formula_like_names_reach_the_tables_as_text_and_numbers_stay_numbers() {
    let (_dir, data, out) = campaign(2);
    let manifest = data.join("m.csv");
    std::fs::write(
        &manifest,
        "trial,audio,frames,group\n\"=HYPERLINK(\"\"x\"\",\"\"y\"\")\",synth-0001-normal.wav,synth-0001-normal.frames.csv,@risky\n-0.5,synth-0002-normal.wav,synth-0002-normal.frames.csv,+g\n",
    )
    .unwrap();
    assert!(batch(&manifest, &out, &["--quiet"]).status.success());
    let mut reader = csv::Reader::from_path(out.join("summary.csv")).unwrap();
    let residual = reader
        .headers()
        .unwrap()
        .iter()
        .position(|h| h == "sync_residual_ms")
        .unwrap();
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
    let cells: Vec<(&str, &str)> = rows.iter().map(|r| (&r[0], &r[1])).collect();
    assert_eq!(
        cells,
        [("-0.5", "'+g"), ("'=HYPERLINK(\"x\",\"y\")", "'@risky")]
    );
    // Measured values keep their sign and stay numbers.
    for r in &rows {
        assert!(
            r[residual].parse::<f64>().is_ok(),
            "sync_residual_ms {:?}",
            &r[residual]
        );
    }
    let groups = std::fs::read_to_string(out.join("groups.csv")).unwrap();
    assert!(
        groups.contains("\n'+g,") && groups.contains("\n'@risky,"),
        "{groups}"
    );
    // The record keeps the name as it is.
    let record = read_json(&out.join("trials/=HYPERLINK(\"x\",\"y\").json"));
    assert_eq!(record["trial"], "=HYPERLINK(\"x\",\"y\")");
}

#[test]
fn a_consistent_clock_offset_is_reported_with_the_command_to_rerun() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    let out = dir.path().join("out");
    // The trials' clocks are 12 ms apart; the rig used for the batch says 0.
    let rig_12 = dir.path().join("rig-12ms.json");
    std::fs::write(
        &rig_12,
        r#"{"video_offset_s": 0.012, "mic_distance_m": 0.3}"#,
    )
    .unwrap();
    let rig_0 = dir.path().join("rig.json");
    std::fs::write(&rig_0, r#"{"mic_distance_m": 0.3}"#).unwrap();
    bin()
        .args(["synth", "--kind", "normal", "--count", "12", "--rig"])
        .arg(&rig_12)
        .arg("--out")
        .arg(&data)
        .assert()
        .success();
    let o = batch(&data, &out, &["--quiet", "--rig", rig_0.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let err = stderr(&o);
    assert!(err.contains("12 of 12 clean trials disagree"), "{err}");
    let suggested: f64 = err
        .split("suggest video_offset_s = ")
        .nth(1)
        .and_then(|s| s.split(' ').next())
        .and_then(|s| s.parse().ok())
        .unwrap_or_else(|| panic!("no suggestion: {err}"));
    // Within 0.1 ms: the clicks' onsets scatter by tens of microseconds at 96 kHz.
    assert!((suggested - 0.012).abs() < 1e-4, "{suggested}");
    let rerun = err
        .lines()
        .find_map(|l| l.strip_prefix("latchtime: re-run with it: latchtime "))
        .unwrap_or_else(|| panic!("no command: {err}"));
    assert!(
        rerun.ends_with(&format!("--video-offset-s {suggested:.6}")),
        "{rerun}"
    );
    // summarize says the same from the records and the run file.
    let o = bin().arg("summarize").arg(&out).output().unwrap();
    assert!(o.status.success());
    assert!(
        stderr(&o).contains(&format!("{suggested:.6}")),
        "{}",
        stderr(&o)
    );
    // Run as suggested, the trials agree and nothing is suggested.
    let words: Vec<&str> = rerun.split(' ').collect();
    let o = bin().args(&words).output().unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!stderr(&o).contains("suggest"), "{}", stderr(&o));
    let summary = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    let flagged = summary.contains(",sync_mismatch") || summary.contains(";sync_mismatch");
    assert!(!flagged, "{summary}");
}
