//! The speed comparison (`cargo bench --bench peer`): one run generates the workload, times the
//! read floor, `latchtime batch --jobs 1 --force`, `--jobs 2` and the numpy/scipy peer
//! (`benches/peer/pipeline.py`) on the same files, and prints the two ratios, the per-stage
//! profile, the cost per second of audio at 0.5 s and 60 s recordings with the peak memory
//! of one worker, and the cost per frame of frames-only records of 1000 to 100,000 frames.
//! Asserts nothing: speed is not a test.
//!
//! Times are CPU seconds (user + system, from `wait4` for the child processes and the thread's
//! CPU clock in-process), the least of `LATCHTIME_PEER_REPEATS` runs (default 3): on a shared
//! machine wall time measures the neighbours. The `--jobs 2` scaling is necessarily wall time.
//!
//! Workload: `LATCHTIME_PEER_TRIALS` (default 300) trials of 0.5 s at 250 kHz, 32-bit float WAV,
//! 2000 fps (1000-frame CSVs), made by `latchtime synth`. The peer runs under
//! `LATCHTIME_PEER_PYTHON` (default `python3`) and is skipped, with a message, when that
//! interpreter lacks numpy, scipy or soundfile (`pip install -r benches/peer/requirements.txt`).

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use latchtime::batch::{atomic::GroupSync, blake3_hex};
use latchtime::decode::{decode_audio_reusing, decode_frames, FrameOptions};
use latchtime::detect::{self, click::ClickScratch};
use latchtime::pipeline::{self, Scratch, TrialInputs, TrialSpec};
use latchtime::report::{self, groups::GroupTable};
use latchtime::{RigProfile, TrialRecord};

const EXE: &str = env!("CARGO_BIN_EXE_latchtime");

/// What a child process cost.
#[derive(Debug, Clone, Copy)]
struct Cost {
    wall_s: f64,
    cpu_s: f64,
    peak_rss_mb: f64,
}

/// Runs `program args`, returning its cost, or `None` when it cannot start or fails.
// wait4 reaps the child: Child::wait cannot return the child's resource usage.
#[allow(clippy::zombie_processes)]
fn run(program: &str, args: &[&str], stdout: Option<&Path>) -> Option<Cost> {
    let mut command = Command::new(program);
    command.args(args).env("OMP_NUM_THREADS", "1");
    command.env("OPENBLAS_NUM_THREADS", "1");
    if let Some(path) = stdout {
        command.stdout(std::fs::File::create(path).ok()?);
    }
    let start = Instant::now();
    let child = command.spawn().ok()?;
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: rusage is plain old data, zero is a valid bit pattern; wait4 fills it for `pid`.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: `pid` is our own child and has not been waited for.
    let waited = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let ok = waited == pid && libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0;
    let secs = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    ok.then(|| Cost {
        wall_s: start.elapsed().as_secs_f64(),
        cpu_s: secs(usage.ru_utime) + secs(usage.ru_stime),
        peak_rss_mb: usage.ru_maxrss as f64 / 1024.0,
    })
}

/// The least CPU time, wall time and memory of `repeats` runs (stdout to `stdout` or shown).
fn best_of(repeats: usize, program: &str, args: &[&str], stdout: Option<&Path>) -> Cost {
    let costs: Vec<Cost> = (0..repeats)
        .map(|_| run(program, args, stdout).unwrap_or_else(|| panic!("{program} failed")))
        .collect();
    let least = |f: fn(&Cost) -> f64| costs.iter().map(f).fold(f64::INFINITY, f64::min);
    Cost {
        wall_s: least(|c| c.wall_s),
        cpu_s: least(|c| c.cpu_s),
        peak_rss_mb: least(|c| c.peak_rss_mb),
    }
}

/// This thread's CPU time, seconds.
fn thread_cpu_s() -> f64 {
    // SAFETY: timespec is plain old data; clock_gettime fills it.
    let mut t: libc::timespec = unsafe { std::mem::zeroed() };
    // SAFETY: a valid clock id and a valid pointer.
    unsafe { libc::clock_gettime(libc::CLOCK_THREAD_CPUTIME_ID, &mut t) };
    t.tv_sec as f64 + t.tv_nsec as f64 * 1e-9
}

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn synth(dir: &Path, count: usize, duration_s: f64) {
    let (out, n, d) = (
        dir.to_string_lossy().into_owned(),
        count.to_string(),
        duration_s.to_string(),
    );
    let args = [
        "synth",
        "--out",
        &out,
        "--count",
        &n,
        "--kind",
        "normal",
        "--duration-s",
        &d,
        "--sample-rate-hz",
        "250000",
        "--fps",
        "2000",
        "--encoding",
        "float32",
        "--seed",
        "7",
    ];
    run(EXE, &args, None).expect("latchtime synth");
    // On disk before any timing, as a campaign's recordings are: otherwise the first flush
    // of the records' group writes the fresh inputs too.
    run("sync", &[], None).expect("sync");
}

/// The trials of a synthetic folder (audio and frames by name), in name order.
fn trials(dir: &Path) -> Vec<TrialSpec> {
    let mut wavs: Vec<PathBuf> = std::fs::read_dir(dir)
        .expect("workload folder")
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|e| e == "wav"))
        .collect();
    wavs.sort();
    wavs.into_iter()
        .map(|wav| {
            let name = pipeline::trial_name(&wav);
            let frames = wav.with_file_name(format!("{name}.frames.csv"));
            TrialSpec {
                name,
                group: None,
                audio: Some(wav),
                frames: frames.exists().then_some(frames),
                video: None,
            }
        })
        .collect()
}

fn input_files(specs: &[TrialSpec]) -> Vec<String> {
    specs
        .iter()
        .flat_map(|s| [&s.audio, &s.frames])
        .flatten()
        .map(|p| p.to_string_lossy().into_owned())
        .collect()
}

/// The peer's interpreter when it has numpy, scipy and soundfile; otherwise why not.
fn peer_python() -> Result<String, String> {
    let python = std::env::var("LATCHTIME_PEER_PYTHON").unwrap_or_else(|_| "python3".into());
    let probe = Command::new(&python)
        .args(["-c", "import numpy, scipy, soundfile"])
        .output();
    match probe {
        Ok(o) if o.status.success() => Ok(python),
        Ok(o) => Err(format!(
            "{python} lacks numpy, scipy or soundfile ({})",
            String::from_utf8_lossy(&o.stderr)
                .lines()
                .last()
                .unwrap_or("")
        )),
        Err(e) => Err(format!("{python} cannot be run ({e})")),
    }
}

/// The peer over `dir`: its whole process's cost and its own loop's CPU seconds.
fn time_peer(python: &str, dir: &Path, scratch: &Path, repeats: usize) -> Option<(Cost, f64)> {
    let script = concat!(env!("CARGO_MANIFEST_DIR"), "/benches/peer/pipeline.py");
    let (d, out) = (
        dir.to_string_lossy().into_owned(),
        scratch.join("peer.csv").to_string_lossy().into_owned(),
    );
    let printed = scratch.join("peer.out");
    let mut best: Option<(Cost, f64)> = None;
    for _ in 0..repeats {
        let cost = run(python, &[script, &d, &out], Some(&printed))?;
        let text = std::fs::read_to_string(&printed).ok()?;
        let loop_s: f64 = text.lines().last()?.trim().parse().ok()?;
        if best.is_none_or(|b| cost.cpu_s < b.0.cpu_s) {
            best = Some((cost, loop_s));
        }
    }
    best
}

/// CPU seconds of each stage over the trials, in the order.
#[derive(Debug, Default)]
struct Stages {
    hash: f64,
    decode_wav: f64,
    audio: f64,
    video: f64,
    bootstrap: f64,
    read: f64,
    frames_json: f64,
    write: f64,
    measure: f64,
}

/// Times each stage of the batch's work in this thread, trial by trial.
fn profile(specs: &[TrialSpec], rig: &RigProfile, out: &Path) -> Stages {
    let mut s = Stages::default();
    let mut inputs = TrialInputs::default();
    let mut scratch = Scratch::default();
    let mut click = ClickScratch::default();
    let mut samples = Vec::new();
    let writer = GroupSync::new(out);
    let mut records: Vec<TrialRecord> = Vec::with_capacity(specs.len());
    let options = FrameOptions::from(rig);
    for spec in specs {
        let t0 = thread_cpu_s();
        pipeline::read_inputs_into(spec, &mut inputs).expect("read inputs");
        let t1 = thread_cpu_s();
        let audio = inputs.audio.as_deref().unwrap_or_default();
        let frames = inputs.frames.as_deref().unwrap_or_default();
        std::hint::black_box((blake3_hex(audio), blake3_hex(frames)));
        let t2 = thread_cpu_s();
        let audio_path = spec.audio.as_deref().unwrap_or(Path::new(""));
        let decoded = decode_audio_reusing(audio_path, audio, 0, std::mem::take(&mut samples))
            .expect("decode audio");
        let t3 = thread_cpu_s();
        let frames_path = spec.frames.as_deref().unwrap_or(Path::new(""));
        let series = decode_frames(frames_path, frames, &options).expect("decode frames");
        let t4 = thread_cpu_s();
        let video = detect::detect_video(&series, rig);
        let t5 = thread_cpu_s();
        let expected = detect::expected_click(&video, rig);
        std::hint::black_box(detect::detect_audio(
            &decoded.signal,
            rig,
            &mut click,
            expected,
        ));
        let t6 = thread_cpu_s();
        samples = decoded.signal.samples;
        let record = pipeline::analyze(spec, &inputs, rig, &mut scratch);
        let t7 = thread_cpu_s();
        let json = report::json::record_json(&record);
        let t8 = thread_cpu_s();
        writer
            .write(&out.join(format!("{}.json", spec.name)), json.as_bytes())
            .expect("write record");
        let t9 = thread_cpu_s();
        s.read += t1 - t0;
        s.hash += t2 - t1;
        s.decode_wav += t3 - t2;
        s.video += t5 - t4;
        s.audio += t6 - t5;
        // `analyze` repeats the stages above; what it spends besides them is the measuring.
        s.measure += ((t7 - t6) - (t6 - t2)).max(0.0);
        s.frames_json += (t4 - t3) + (t8 - t7);
        s.write += t9 - t8;
        records.push(record);
    }
    let t0 = thread_cpu_s();
    writer.finish().expect("flush records");
    s.write += thread_cpu_s() - t0;
    let t0 = thread_cpu_s();
    let mut table = GroupTable::default();
    for r in &records {
        table.add(r);
    }
    std::hint::black_box(table.rows());
    s.bootstrap = thread_cpu_s() - t0;
    s
}

fn print_profile(s: &Stages, trials: usize) {
    let rows = [
        ("BLAKE3 of the inputs", s.hash),
        ("WAV decode (float32, one pass)", s.decode_wav),
        ("audio detection", s.audio),
        (
            "video detection (release, loading, oscillation, clock)",
            s.video,
        ),
        ("summary bootstrap (groups.csv statistics)", s.bootstrap),
        ("read", s.read),
        ("frames CSV parse, record JSON", s.frames_json),
        ("record writes (atomic, disk synced per group)", s.write),
        ("measure (timing, sync, amplification, flags)", s.measure),
    ];
    let total: f64 = rows.iter().map(|r| r.1).sum();
    println!("\nper-stage CPU profile, one thread, {trials} trials ({total:.3} s in all):");
    for (name, secs) in rows {
        println!(
            "  {name:56} {:8.1} ms {:5.1} %  {:7.1} us/trial",
            secs * 1e3,
            100.0 * secs / total.max(1e-12),
            secs / trials as f64 * 1e6
        );
    }
}

/// CPU per second of audio of an audio-only analysis, in this thread, with one worker's
/// scratch reused as a batch reuses it.
fn audio_cost_per_second(specs: &[TrialSpec], rig: &RigProfile) -> f64 {
    let mut scratch = Scratch::default();
    let mut inputs = TrialInputs::default();
    let (mut cpu_s, mut audio_s) = (0.0, 0.0);
    for spec in specs {
        let audio_only = TrialSpec {
            frames: None,
            ..spec.clone()
        };
        let t0 = thread_cpu_s();
        pipeline::read_inputs_into(&audio_only, &mut inputs).expect("read inputs");
        let (record, _) = pipeline::analyze_in_place(&audio_only, &mut inputs, rig, &mut scratch);
        cpu_s += thread_cpu_s() - t0;
        audio_s += record.audio_duration_s.unwrap_or(0.0);
    }
    cpu_s / audio_s.max(1e-12)
}

fn main() {
    let count = env_usize("LATCHTIME_PEER_TRIALS", 300);
    let repeats = env_usize("LATCHTIME_PEER_REPEATS", 3).max(1);
    let root = tempfile::tempdir().expect("tempdir");
    let work = root.path().join("work");
    synth(&work, count, 0.5);
    let specs = trials(&work);
    let files = input_files(&specs);
    let file_args: Vec<&str> = files.iter().map(String::as_str).collect();
    let bytes: u64 = files
        .iter()
        .filter_map(|f| std::fs::metadata(f).ok())
        .map(|m| m.len())
        .sum();
    println!(
        "workload: {} trials of 0.5 s at 250 kHz float32 WAV + 1000-frame CSVs, {:.1} MB",
        specs.len(),
        bytes as f64 / 1e6
    );
    println!("times: CPU seconds (user + system), least of {repeats} runs; scaling: wall\n");
    // Everything from the page cache: read once before any timing.
    let null = Some(Path::new("/dev/null"));
    run("cat", &file_args, null).expect("cat the workload");
    let floor = best_of(repeats, "cat", &file_args, null);
    let out = root.path().join("out");
    let (w, o) = (
        work.to_string_lossy().into_owned(),
        out.to_string_lossy().into_owned(),
    );
    let batch = |jobs: &str| {
        let args = [
            "batch", &w, "--out", &o, "--quiet", "--force", "--jobs", jobs,
        ];
        best_of(repeats, EXE, &args, None)
    };
    let one = batch("1");
    let two = batch("2");
    println!(
        "read floor (cat from the page cache)     {:7.3} s",
        floor.cpu_s
    );
    println!(
        "latchtime batch --jobs 1 --force          {:7.3} s  (wall {:.3} s, peak RSS {:.1} MB)",
        one.cpu_s, one.wall_s, one.peak_rss_mb
    );
    println!(
        "latchtime batch --jobs 2 --force          {:7.3} s  (wall {:.3} s, peak RSS {:.1} MB)",
        two.cpu_s, two.wall_s, two.peak_rss_mb
    );
    match peer_python().and_then(|py| {
        time_peer(&py, &work, root.path(), repeats).ok_or_else(|| format!("{py} {PEER} failed"))
    }) {
        Ok((peer, loop_s)) => {
            println!(
                "numpy/scipy peer (whole process)          {:7.3} s  (its loop alone {loop_s:.3} s)",
                peer.cpu_s
            );
            println!(
                "\npeer / latchtime --jobs 1:   {:5.1}x faster (target: 15x)",
                peer.cpu_s / one.cpu_s
            );
        }
        Err(why) => println!("\nnumpy/scipy peer skipped: {why}"),
    }
    println!(
        "latchtime --jobs 1 / floor:  {:5.1}x the read floor (target: within 5x)",
        one.cpu_s / floor.cpu_s.max(1e-3)
    );
    println!(
        "scaling --jobs 2 (wall):     {:5.2}x (target: 1.8x)",
        one.wall_s / two.wall_s
    );
    let rig = RigProfile::default();
    let records = root.path().join("profile");
    std::fs::create_dir_all(&records).expect("profile folder");
    print_profile(&profile(&specs, &rig, &records), specs.len());
    long_recordings(root.path(), &specs, &rig);
    frame_scaling(root.path(), repeats);
}

/// CPU of frames-only batches (`--jobs 1`) of 100,000 frames in all at 2000 fps: 100 records
/// of 1000 frames, 10 of 10,000 and one of 100,000. The same time for each means a cost
/// linear in the frame count (issue 18); process start and the campaign's own files weigh
/// the same in all three.
fn frame_scaling(root: &Path, repeats: usize) {
    println!(
        "
frames only, 100,000 frames in all at 2000 fps, batch --jobs 1:"
    );
    let mut first_us = None;
    for (count, secs) in [(100usize, 0.5), (10, 5.0), (1, 50.0)] {
        let dir = root.join(format!("frames-{count}"));
        synth(&dir, count, secs);
        for spec in trials(&dir) {
            if let Some(audio) = spec.audio {
                let _ = std::fs::remove_file(audio);
            }
        }
        let (d, o) = (
            dir.to_string_lossy().into_owned(),
            root.join(format!("frames-{count}-out"))
                .to_string_lossy()
                .into_owned(),
        );
        let args = [
            "batch", &d, "--out", &o, "--quiet", "--force", "--jobs", "1",
        ];
        let cost = best_of(repeats, EXE, &args, None);
        let us = cost.cpu_s / 100_000.0 * 1e6;
        let base = *first_us.get_or_insert(us);
        // No peak memory here: after the in-process decoding above, a child's maximum
        // resident size as wait4 reports it can start from this process's own.
        println!(
            "  {count:3} x {:6} frames: {:6.3} s of CPU, {us:5.2} us a frame ({:+.0} %)",
            (secs * 2000.0) as usize,
            cost.cpu_s,
            100.0 * (us / base - 1.0)
        );
    }
}

const PEER: &str = "benches/peer/pipeline.py";

/// Cost per second of audio at 0.5 s and at 60 s, and the peak memory of one worker on 60 s.
fn long_recordings(root: &Path, short: &[TrialSpec], rig: &RigProfile) {
    let long_count = env_usize("LATCHTIME_PEER_LONG_TRIALS", 3);
    let long_dir = root.join("long");
    synth(&long_dir, long_count, 60.0);
    // Audio only: the frames of a 60 s record are another benchmark's subject.
    for spec in trials(&long_dir) {
        if let Some(f) = spec.frames {
            let _ = std::fs::remove_file(f);
        }
    }
    let long = trials(&long_dir);
    let wav_mb = long
        .iter()
        .filter_map(|s| s.audio.as_ref().and_then(|a| std::fs::metadata(a).ok()))
        .map(|m| m.len() as f64 / 1e6)
        .fold(0.0, f64::max);
    let (l, o) = (
        long_dir.to_string_lossy().into_owned(),
        root.join("long-out").to_string_lossy().into_owned(),
    );
    let args = [
        "batch", &l, "--out", &o, "--quiet", "--force", "--jobs", "1",
    ];
    // Before any decoding in this process: a child's maximum resident size, as wait4
    // reports it, can start from the size of the process that forked it.
    let cost = run(EXE, &args, None).expect("batch of long recordings");
    let per_s_short = audio_cost_per_second(short, rig);
    let per_s_long = audio_cost_per_second(&long, rig);
    println!("\naudio only, CPU per second of audio, one worker:");
    println!("  0.5 s recordings: {:7.2} ms/s", per_s_short * 1e3);
    println!(
        "  60 s recordings:  {:7.2} ms/s  ({:+.0} %)",
        per_s_long * 1e3,
        100.0 * (per_s_long / per_s_short - 1.0)
    );
    println!(
        "  peak RSS of batch --jobs 1 over {long_count} x 60 s: {:.1} MB (WAV {wav_mb:.1} MB each; target: 2 x WAV + 20 MB = {:.1} MB)",
        cost.peak_rss_mb,
        2.0 * wav_mb + 20.0
    );
}
