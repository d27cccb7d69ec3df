//! Campaign benchmarks (`cargo bench`): per-trial CPU of the analysis, batch throughput at
//! `--jobs 1` and `--jobs 2`, peak resident memory at two campaign sizes, and the time to
//! resume a finished campaign. Prints a table; asserts nothing (speed is not a test).
//!
//! Sizes: `LATCHTIME_BENCH_TRIALS` (default 2000) trials of 1 s at 96 kHz with 1000 frames,
//! and a tenth of that for the memory comparison.

use std::path::Path;
use std::process::Command;
use std::time::Instant;

use latchtime::pipeline::{analyze, read_inputs, Scratch, TrialSpec};
use latchtime::synth::{self, SampleEncoding, SynthConfig, TrialKind};
use latchtime::RigProfile;

const EXE: &str = env!("CARGO_BIN_EXE_latchtime");

/// Runs the binary, returning wall seconds and peak resident memory in MB.
// wait4 reaps the child: Child::wait cannot return the child's resource usage.
#[allow(clippy::zombie_processes)]
fn run(args: &[&str]) -> (f64, f64) {
    let start = Instant::now();
    let child = Command::new(EXE)
        .args(args)
        .spawn()
        .expect("spawn latchtime");
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: rusage is plain old data, zero is a valid bit pattern; wait4 fills it for `pid`.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: `pid` is our own child and has not been waited for.
    let waited = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    assert_eq!(waited, pid, "wait4 failed");
    assert!(
        libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0,
        "latchtime failed: {args:?}"
    );
    (
        start.elapsed().as_secs_f64(),
        usage.ru_maxrss as f64 / 1024.0,
    )
}

fn synth_campaign(dir: &Path, count: usize) {
    let out = dir.to_string_lossy().into_owned();
    let n = count.to_string();
    run(&[
        "synth",
        "--out",
        &out,
        "--count",
        &n,
        "--duration-s",
        "1.0",
        "--sample-rate-hz",
        "96000",
        "--fps",
        "1000",
        "--seed",
        "42",
    ]);
}

fn per_trial_cpu() {
    let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).expect("demo rig");
    let dir = tempfile::tempdir().expect("tempdir");
    let config = SynthConfig {
        sample_rate_hz: 250_000,
        fps: 1000.0,
        duration_s: 0.5,
        encoding: SampleEncoding::Int16,
        ..SynthConfig::default()
    };
    let trial = synth::generate("cpu", TrialKind::Normal, &config, &rig, 9);
    synth::write_trial(dir.path(), &trial).expect("write trial");
    let spec = TrialSpec {
        name: "cpu".into(),
        group: None,
        audio: Some(dir.path().join("cpu.wav")),
        frames: Some(dir.path().join("cpu.frames.csv")),
        video: None,
    };
    let inputs = read_inputs(&spec).expect("read");
    let mut scratch = Scratch::default();
    let audio_only = TrialSpec {
        frames: None,
        ..spec.clone()
    };
    let video_only = TrialSpec {
        audio: None,
        ..spec.clone()
    };
    for (label, s) in [
        ("audio + frames", &spec),
        ("audio only", &audio_only),
        ("frames only", &video_only),
    ] {
        let reps = 200;
        let start = Instant::now();
        for _ in 0..reps {
            std::hint::black_box(analyze(s, &inputs, &rig, &mut scratch));
        }
        let us = start.elapsed().as_secs_f64() / reps as f64 * 1e6;
        println!("per-trial CPU, 0.5 s at 250 kHz 16-bit + 500 frames, {label:14}: {us:8.0} us");
    }
}

fn main() {
    per_trial_cpu();
    let big: usize = std::env::var("LATCHTIME_BENCH_TRIALS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(2000);
    let small = (big / 10).max(1);
    let root = tempfile::tempdir().expect("tempdir");
    let big_dir = root.path().join("big");
    let small_dir = root.path().join("small");
    let t = Instant::now();
    synth_campaign(&big_dir, big);
    synth_campaign(&small_dir, small);
    println!(
        "synthesis of {} trials: {:.1} s",
        big + small,
        t.elapsed().as_secs_f64()
    );
    let out = root.path().join("out");
    let (b, o) = (
        big_dir.to_string_lossy().into_owned(),
        out.to_string_lossy().into_owned(),
    );
    let mut rates = Vec::new();
    for jobs in ["1", "2"] {
        let (secs, mb) = run(&[
            "batch", &b, "--out", &o, "--quiet", "--force", "--jobs", jobs,
        ]);
        let rate = big as f64 / secs;
        rates.push(rate);
        println!("batch {big} trials --jobs {jobs}: {secs:6.2} s, {rate:7.1} trials/s, peak RSS {mb:6.1} MB");
    }
    println!("scaling jobs 2 / jobs 1: {:.2}", rates[1] / rates[0]);
    let (secs, mb) = run(&["batch", &b, "--out", &o, "--quiet"]);
    println!("resume of finished {big}-trial campaign: {secs:.2} s, peak RSS {mb:.1} MB");
    let small_out = root.path().join("small-out").to_string_lossy().into_owned();
    let s = small_dir.to_string_lossy().into_owned();
    let (secs, mb) = run(&["batch", &s, "--out", &small_out, "--quiet", "--jobs", "2"]);
    println!("batch {small} trials --jobs 2: {secs:6.2} s, peak RSS {mb:6.1} MB");
    let (secs, mb) = run(&["report", &small_out]);
    println!(
        "report over {small} trials: {secs:6.2} s ({:.2} ms per trial), peak RSS {mb:6.1} MB",
        secs / small as f64 * 1e3
    );
}
