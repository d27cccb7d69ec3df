//! Bad input never panics and never stops a batch: each bad trial becomes an error record that
//! names its file and the problem, and the good trials beside it are measured as usual. Every
//! file in tests/data/regress/ (inputs that once crashed or were mis-read, or were built to
//! probe a known trap) is replayed.

mod common;

use common::{bin, read_json, repo};

#[test]
fn a_folder_of_bad_trials_mixed_with_good_ones_gives_one_record_each() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("in");
    bin()
        .args(["synth", "--count", "2", "--kind", "normal", "--out"])
        .arg(&data)
        .assert()
        .success();
    let write = |name: &str, bytes: &[u8]| std::fs::write(data.join(name), bytes).unwrap();
    write("zero-byte.wav", b"");
    write(
        "random-bytes.wav",
        &(0..5000u32)
            .map(|i| (i.wrapping_mul(2_654_435_761) >> 13) as u8)
            .collect::<Vec<_>>(),
    );
    let good = std::fs::read(data.join("synth-0001-normal.wav")).unwrap();
    write("truncated-header.wav", &good[..30]);
    write("truncated-data.wav", &good[..good.len() / 2 + 1]);
    write("garbage.frames.csv", b"\x00\x01\x02 not a csv at all");
    write("no-header.frames.csv", b"0.0,1\n0.001,2\n0.002,3\n0.003,4\n0.004,5\n0.005,6\n0.006,7\n0.007,8\n0.008,9\n0.009,10\n0.010,11\n");
    write(
        "text-in-numbers.frames.csv",
        b"time_s,b\n0.0,1\n0.001,two\n",
    );
    write("backwards.frames.csv", b"time_s,b\n0.0,1\n0.002,2\n0.001,3\n0.003,4\n0.004,5\n0.005,6\n0.006,7\n0.007,8\n0.008,9\n0.009,10\n");
    let long_line = format!("time_s,b\n{}\n", "9".repeat(2_000_000));
    write("enormous-line.frames.csv", long_line.as_bytes());
    let out = dir.path().join("out");
    bin()
        .arg("batch")
        .arg(&data)
        .arg("--out")
        .arg(&out)
        .arg("--quiet")
        .assert()
        .success();
    for bad in [
        "zero-byte",
        "random-bytes",
        "truncated-header",
        "truncated-data",
        "garbage",
        "no-header",
        "text-in-numbers",
        "backwards",
        "enormous-line",
    ] {
        let record = read_json(&out.join("trials").join(format!("{bad}.json")));
        assert_eq!(record["status"], "error", "{bad}: {record}");
        let message = record["error"].as_str().unwrap();
        assert!(
            message.contains(bad),
            "{bad}: message does not name the file: {message}"
        );
    }
    for good in ["synth-0001-normal", "synth-0002-normal"] {
        let record = read_json(&out.join("trials").join(format!("{good}.json")));
        assert_eq!(record["status"], "ok", "{good}: {record}");
    }
}

#[test]
fn manifest_rows_naming_missing_files_or_unsafe_names_become_error_records_inside_out() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = dir.path().join("m.csv");
    std::fs::write(
        &manifest,
        "trial,audio,frames,group\nmissing,nothere.wav,,g\n../escape,nothere.wav,,g\n/abs/name,,x.frames.csv,g\nnostream,,,g\n",
    )
    .unwrap();
    let out = dir.path().join("out");
    bin()
        .arg("batch")
        .arg(&manifest)
        .arg("--out")
        .arg(&out)
        .arg("--quiet")
        .assert()
        .success();
    let records: Vec<_> = std::fs::read_dir(out.join("trials"))
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .collect();
    assert_eq!(records.len(), 4, "{records:?}");
    for r in &records {
        let record = read_json(r);
        assert_eq!(record["status"], "error");
    }
    let missing = read_json(&out.join("trials/missing.json"));
    assert!(missing["error"].as_str().unwrap().contains("nothere.wav"));
    // Nothing was written next to the output folder.
    let siblings: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .flatten()
        .map(|e| e.file_name())
        .collect();
    assert_eq!(siblings.len(), 2, "{siblings:?}");
}

#[test]
fn every_regression_file_gives_an_error_record_and_no_panic() {
    let regress = repo().join("tests/data/regress");
    let mut files: Vec<_> = std::fs::read_dir(&regress)
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|e| e != "md"))
        .collect();
    files.sort();
    assert!(
        files.len() >= 10,
        "regression corpus has {} files",
        files.len()
    );
    for f in files {
        let flag = if f.to_string_lossy().ends_with(".frames.csv") {
            "--frames"
        } else {
            "--audio"
        };
        let out = bin()
            .args(["trial", "--format", "json", flag])
            .arg(&f)
            .output()
            .unwrap();
        // Exit 1 is "trial could not be analysed"; a panic would be 101.
        assert_eq!(
            out.status.code(),
            Some(1),
            "{}: {}",
            f.display(),
            String::from_utf8_lossy(&out.stderr)
        );
        let record: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        let name = f.file_name().unwrap().to_string_lossy().into_owned();
        assert!(
            record["error"].as_str().unwrap().contains(&name),
            "{record}"
        );
    }
}
