//! Throughput of video decoding and of decoding plus measures (one thread), frames per second.
//!
//! `cargo run --release --example video_speed render DIR [FRAMES]` writes a rendered 512 x 512
//! trial (8-bit PGM sequence, 2000 fps) into DIR; other formats are made from it with ffmpeg
//! (see calibration/README.md). `cargo run --release --example video_speed time PATH...` then
//! reads each video once to decode only, then through `track::measure_video_within` three
//! times: with the default replay budget (`track::replay::BUDGET_BYTES`), with none (every
//! frame decoded twice) and with no limit (every frame decoded once); it prints a table row per
//! video and whether the three gave the same measures, bit for bit.

use latchtime::decode::video;
use latchtime::rig::RigProfile;
use latchtime::synth::{self, SynthConfig, TrialKind};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match args.first().map(String::as_str) {
        Some("render") => render(&args[1..]),
        Some("time") => {
            println!("| video | frames | decode only | measures, default budget | decoded twice | decoded once | identical |");
            println!("|---|---|---|---|---|---|---|");
            for p in &args[1..] {
                time(std::path::Path::new(p))?;
            }
            Ok(())
        }
        _ => Err("usage: video_speed render DIR [FRAMES] | time PATH...".into()),
    }
}

fn render(args: &[String]) -> Result<(), Box<dyn std::error::Error>> {
    let dir = std::path::Path::new(args.first().ok_or("render needs DIR")?);
    let frames: f64 = args.get(1).and_then(|a| a.parse().ok()).unwrap_or(1000.0);
    let fps = 2000.0;
    let config = SynthConfig {
        fps,
        audio: false,
        video_noise: 0.0,
        duration_s: frames / fps,
        ..SynthConfig::default()
    };
    let trial = synth::generate(
        "speed",
        TrialKind::Normal,
        &config,
        &RigProfile::default(),
        5,
    );
    let scene = synth::video::Scene {
        width: 512,
        height: 512,
        pivot_px: (130.0, 256.0),
        bar_length_px: 220.0,
        bar_width_px: 28.0,
        flicker: Some((100.0, 0.03)),
        ..synth::video::Scene::default()
    };
    std::fs::create_dir_all(dir)?;
    for (k, img) in synth::video::render(&trial, &scene) {
        let bytes = synth::video::pgm_bytes(512, 512, &img, 255);
        std::fs::write(dir.join(format!("f_{k:05}.pgm")), bytes)?;
    }
    Ok(())
}

/// CPU seconds used by this process so far (the machine may be shared: wall time would count
/// other programs' turns).
fn cpu_s() -> f64 {
    let mut t = libc::timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    // SAFETY: `t` is a valid timespec for the call to fill.
    unsafe { libc::clock_gettime(libc::CLOCK_PROCESS_CPUTIME_ID, &mut t) };
    t.tv_sec as f64 + t.tv_nsec as f64 * 1e-9
}

fn time(path: &std::path::Path) -> Result<(), Box<dyn std::error::Error>> {
    let start = cpu_s();
    let mut source = video::open(path)?;
    let mut n = 0usize;
    while source.next_frame()?.is_some() {
        n += 1;
    }
    let decode_s = cpu_s() - start;
    let mut rates = Vec::new();
    let mut measures = Vec::new();
    for budget in [latchtime::track::replay::BUDGET_BYTES, 0, usize::MAX] {
        let start = cpu_s();
        let m = latchtime::track::measure_video_within(
            || video::open(path),
            &Default::default(),
            budget,
        )?;
        rates.push(m.frame_index.len() as f64 / (cpu_s() - start));
        // Debug prints each f64 in its shortest exact form: equal text, equal bits.
        measures.push(format!("{m:?}"));
    }
    println!(
        "| {} | {n} | {:.0} | {:.0} | {:.0} | {:.0} | {} |",
        path.display(),
        n as f64 / decode_s,
        rates[0],
        rates[1],
        rates[2],
        if measures.iter().all(|m| *m == measures[0]) {
            "yes"
        } else {
            "NO"
        }
    );
    Ok(())
}
