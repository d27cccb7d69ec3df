//! Overnight-campaign guarantees: a batch killed with SIGKILL at any point resumes to records
//! byte-identical to an uninterrupted run, with no temporary or lock files left; shards cover every
//! trial exactly once; a changed rig setting recomputes every trial it affects; groups.csv
//! agrees with statistics computed independently; records of the SHA-256 era are recomputed once.

mod common;

use std::collections::BTreeMap;
use std::path::Path;
use std::time::Duration;

use common::{batch_messages, bin, quiet_batch, read_json};

fn synth(dir: &Path, count: usize) {
    bin()
        .args(["synth", "--seed", "3", "--duration-s", "1.0", "--count"])
        .arg(count.to_string())
        .arg("--out")
        .arg(dir)
        .assert()
        .success();
}

fn records(out: &Path) -> BTreeMap<String, Vec<u8>> {
    std::fs::read_dir(out.join("trials"))
        .map(|d| {
            d.flatten()
                .map(|e| {
                    (
                        e.file_name().to_string_lossy().into_owned(),
                        std::fs::read(e.path()).unwrap(),
                    )
                })
                .collect()
        })
        .unwrap_or_default()
}

#[test]
fn a_batch_killed_at_any_point_resumes_to_identical_records() {
    let data = tempfile::tempdir().unwrap();
    synth(data.path(), 40);
    let reference = tempfile::tempdir().unwrap();
    quiet_batch(data.path(), reference.path(), &[]);
    let expected = records(reference.path());
    assert_eq!(expected.len(), 40);
    let mut interrupted = 0;

    for delay_ms in [5u64, 30, 80, 160, 400] {
        let out = tempfile::tempdir().unwrap();
        let exe = assert_cmd::cargo::cargo_bin("latchtime");
        let mut child = std::process::Command::new(&exe)
            .arg("batch")
            .arg(data.path())
            .arg("--out")
            .arg(out.path())
            .args(["--quiet", "--jobs", "2"])
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        // Child::kill sends SIGKILL on Unix.
        let _ = child.kill();
        let _ = child.wait();
        // Whatever the kill left must be complete records only (or temp files).
        let left = records(out.path());
        if left.keys().filter(|n| !n.starts_with('.')).count() < expected.len() {
            interrupted += 1;
        }
        for (name, bytes) in left {
            if !name.starts_with('.') {
                assert_eq!(
                    Some(&bytes),
                    expected.get(&name),
                    "partial record {name} after kill at {delay_ms} ms"
                );
            }
        }
        // The killed run's lock is released by the system, so the resume is not refused.
        quiet_batch(data.path(), out.path(), &[]);
        let resumed = records(out.path());
        let hidden: Vec<String> = std::fs::read_dir(out.path())
            .unwrap()
            .flatten()
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with('.'))
            .collect();
        assert!(hidden.is_empty(), "left after resume: {hidden:?}");
        assert!(read_json(&out.path().join("run.json"))["finished"].is_string());
        assert_eq!(resumed, expected, "after kill at {delay_ms} ms");
        let summary = std::fs::read(out.path().join("summary.csv")).unwrap();
        assert_eq!(
            summary,
            std::fs::read(reference.path().join("summary.csv")).unwrap()
        );
    }
    assert!(interrupted >= 1, "no kill landed before the batch finished");
}

#[test]
fn shards_together_cover_every_trial_exactly_once() {
    let data = tempfile::tempdir().unwrap();
    synth(data.path(), 30);
    for n in [1u32, 2, 3, 7] {
        let out = tempfile::tempdir().unwrap();
        let mut seen: BTreeMap<String, u32> = BTreeMap::new();
        for k in 1..=n {
            let before: Vec<String> = records(out.path()).into_keys().collect();
            bin()
                .arg("batch")
                .arg(data.path())
                .arg("--out")
                .arg(out.path())
                .args(["--quiet", "--shard", &format!("{k}/{n}")])
                .assert()
                .success();
            for name in records(out.path()).into_keys() {
                if !before.contains(&name) {
                    *seen.entry(name).or_default() += 1;
                }
            }
        }
        assert_eq!(seen.len(), 30, "n = {n}");
        assert!(seen.values().all(|c| *c == 1));
    }
    bin()
        .args(["batch", "x", "--out", "y", "--shard", "0/3"])
        .assert()
        .code(2);
    bin()
        .args(["batch", "x", "--out", "y", "--shard", "4/3"])
        .assert()
        .code(2);
}

#[test]
fn a_changed_rig_setting_recomputes_the_trials_it_affects() {
    let data = tempfile::tempdir().unwrap();
    synth(data.path(), 3);
    let out = tempfile::tempdir().unwrap();
    let rig = data.path().join("rig.json");
    let rig_arg = rig.to_string_lossy().into_owned();
    let run = || batch_messages(data.path(), out.path(), &["--rig", &rig_arg]);
    std::fs::write(&rig, r#"{"mic_distance_m": 0.3}"#).unwrap();
    assert!(run().contains("(3 analysed, 0 current"));
    assert!(run().contains("(0 analysed, 3 current"));
    std::fs::write(&rig, r#"{"mic_distance_m": 0.3, "double_click_db": -10}"#).unwrap();
    assert!(run().contains("(3 analysed, 0 current"));
    // A command-line override is a setting too.
    let o = bin()
        .arg("batch")
        .arg(data.path())
        .arg("--out")
        .arg(out.path())
        .arg("--rig")
        .arg(&rig)
        .args(["--channel", "0"])
        .output()
        .unwrap();
    assert!(String::from_utf8_lossy(&o.stderr).contains("(0 analysed, 3 current"));
}

#[test]
fn groups_csv_matches_statistics_computed_from_summary_csv() {
    let out = tempfile::tempdir().unwrap();
    common::sample_batch("sample-audio/manifest.csv", out.path(), &[]);
    // Read as a statistics user does: one number per row, looked up by group, measure and
    // statistic.
    let mut reader = csv::Reader::from_path(out.path().join("groups.csv")).unwrap();
    let header: Vec<String> = reader.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(header, ["group", "measure", "statistic", "value", "note"]);
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
    let groups: std::collections::BTreeSet<&str> = rows.iter().map(|r| &r[0]).collect();
    assert_eq!(
        groups.len(),
        4,
        "three groups and the row over all trials: {groups:?}"
    );
    let cell = |g: &str, m: &str, s: &str| {
        rows.iter()
            .find(|r| &r[0] == g && &r[1] == m && &r[2] == s)
            .unwrap_or_else(|| panic!("no row {g},{m},{s}"))
            .clone()
    };
    let get = |m: &str, s: &str| cell("leaf-0.8mm", m, s)[3].parse::<f64>().unwrap();
    // Recompute loading_ms statistics for the group from the records, independently.
    let mut loading: Vec<f64> = (1..=5)
        .filter_map(|i| {
            read_json(&out.path().join(format!("trials/ls2-thin-0{i}.json")))["loading_ms"].as_f64()
        })
        .collect();
    loading.sort_by(f64::total_cmp);
    let n = loading.len() as f64;
    let mean = loading.iter().sum::<f64>() / n;
    let sd = (loading.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    // Six significant digits: within 1e-5 of the value, relative.
    assert_eq!(get("loading_ms", "n"), n);
    assert!((get("loading_ms", "mean") - mean).abs() < 1e-5 * mean);
    assert!((get("loading_ms", "sd") - sd).abs() < 1e-5 * sd);
    assert_eq!(get("trials", "count"), 5.0);
    assert_eq!(get("flag_double_click", "count"), 1.0);
    assert_eq!(get("flag_clipped", "count"), 1.0);
    if n >= 5.0 {
        assert!(get("loading_ms", "ci95_low") <= mean && mean <= get("loading_ms", "ci95_high"));
    } else {
        let low = cell("leaf-0.8mm", "loading_ms", "ci95_low");
        assert!(low[3].is_empty() && low[4].contains("n < 5"), "{low:?}");
    }
    assert_eq!(&cell("(all)", "trials", "count")[3], "14");
}

/// Lower-case hex SHA-256 of a file, as versions before BLAKE3 wrote it into `provenance`.
fn sha256_of_file(path: &Path) -> String {
    use sha2::{Digest, Sha256};
    format!("{:x}", Sha256::digest(std::fs::read(path).unwrap()))
}

#[test]
fn records_holding_the_old_sha256_provenance_are_recomputed_once_then_reused() {
    let data = tempfile::tempdir().unwrap();
    synth(data.path(), 2);
    let out = tempfile::tempdir().unwrap();
    let run = || batch_messages(data.path(), out.path(), &[]);
    assert!(run().contains("(2 analysed, 0 current"));
    // Rewrite every record as an earlier version wrote it: SHA-256 of the same inputs under
    // the `*_sha256` names (the settings' digest is any SHA-256: no BLAKE3 digest equals it).
    for entry in std::fs::read_dir(out.path().join("trials")).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_none_or(|e| e != "json") {
            continue;
        }
        let mut record = read_json(&path);
        let audio = record["audio_file"].as_str().unwrap().to_string();
        let frames = record["frames_file"].as_str().unwrap().to_string();
        let p = &mut record["provenance"];
        let settings = p["settings_blake3"].as_str().unwrap().to_string();
        *p = serde_json::json!({
            "tool_version": p["tool_version"],
            "audio_sha256": sha256_of_file(Path::new(&audio)),
            "frames_sha256": sha256_of_file(Path::new(&frames)),
            "settings_sha256": format!("{:x}", <sha2::Sha256 as sha2::Digest>::digest(settings)),
        });
        std::fs::write(&path, serde_json::to_string_pretty(&record).unwrap()).unwrap();
    }
    assert!(run().contains("(2 analysed, 0 current"));
    for entry in std::fs::read_dir(out.path().join("trials")).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "json") {
            let record = read_json(&path);
            let audio = record["audio_file"].as_str().unwrap();
            // BLAKE3 of the audio bytes, computed here by the reference crate.
            let want = blake3::hash(&std::fs::read(audio).unwrap())
                .to_hex()
                .to_string();
            assert_eq!(record["provenance"]["audio_blake3"], want.as_str());
            assert!(record["provenance"].get("audio_sha256").is_none());
        }
    }
    assert!(run().contains("(0 analysed, 2 current"));
}
