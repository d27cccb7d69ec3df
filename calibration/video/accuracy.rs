//! Accuracy of the video measures on rendered trials with truth: a bar swinging about a pivot
//! (large swing 30 degrees, small 3 degrees), camera noise, with and without a 100 Hz lamp,
//! at 1000 and 2000 fps. Each trial is written as a PGM sequence and run through the same
//! pipeline as `latchtime batch`.
//!
//! Run: `cargo run --release --example video_accuracy [TRIALS_PER_CELL [small|large [FPS,..]]]`
//! (default 6 trials per cell, both swings, 1000 and 2000 fps). `SHUTTER=0.5` renders motion
//! blur of a 180-degree shutter; `VIDEO_COLUMN=pca1` feeds that measure.

use std::path::Path;

use latchtime::pipeline::Scratch;
use latchtime::rig::RigProfile;
use latchtime::synth::{self, video, TrialKind};
use latchtime::validate::video::{analyze_rendered, rendered_trial_config, score_rendered};

fn median(mut v: Vec<f64>) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let per_cell: u64 = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(6);
    let root =
        std::env::temp_dir().join(format!("latchtime-video-accuracy-{}", std::process::id()));
    println!("| swing | lamp | fps | trials | measure used (track/pca) | release median abs error, frames | release median signed error, frames | release within 1 frame | peak median, frames | loading within 5 ms | frequency within 3 % (of those with truth) |");
    println!("|---|---|---|---|---|---|---|---|---|---|---|");
    let swings: Vec<(&str, f64)> = match std::env::args().nth(2).as_deref() {
        Some("small") => vec![("3 deg", 3.0)],
        Some("large") => vec![("30 deg", 30.0)],
        _ => vec![("30 deg", 30.0), ("3 deg", 3.0)],
    };
    for (swing_name, swing_deg) in swings {
        for flicker in [None, Some((100.0, 0.04))] {
            let rates: Vec<f64> = std::env::args()
                .nth(3)
                .map(|a| a.split(',').filter_map(|f| f.parse().ok()).collect())
                .unwrap_or_else(|| vec![1000.0, 2000.0]);
            for fps in rates {
                let row = run_cell(&root, swing_deg, flicker, fps, per_cell)?;
                let lamp = flicker.map_or("none".into(), |f: (f64, f64)| format!("{} Hz", f.0));
                println!(
                    "| {swing_name} | {lamp} | {fps} | {} | {}/{} | {:.2} | {:+.2} | {}/{} | {:.2} | {}/{} | {}/{} |",
                    row.trials, row.tracked, row.pca,
                    median(row.release_err.iter().map(|e| e.abs()).collect()),
                    median(row.release_err.clone()),
                    row.release_err.iter().filter(|e| e.abs() <= 1.0).count(), row.release_err.len(),
                    median(row.peak_err.clone()),
                    row.loading_ok, row.loading_n, row.freq_ok, row.freq_n
                );
            }
        }
    }
    let _ = std::fs::remove_dir_all(&root);
    Ok(())
}

#[derive(Default)]
struct Row {
    trials: usize,
    tracked: usize,
    pca: usize,
    release_err: Vec<f64>,
    peak_err: Vec<f64>,
    loading_ok: usize,
    loading_n: usize,
    freq_ok: usize,
    freq_n: usize,
}

fn run_cell(
    root: &Path,
    swing_deg: f64,
    flicker: Option<(f64, f64)>,
    fps: f64,
    n: u64,
) -> Result<Row, Box<dyn std::error::Error>> {
    let mut row = Row::default();
    let config = rendered_trial_config(fps, 0.4);
    // `VIDEO_COLUMN=track_px` (or `pca1`) feeds that measure instead of the automatic choice.
    let rig = RigProfile {
        fps: Some(fps),
        frames_column: std::env::var("VIDEO_COLUMN").ok(),
        ..RigProfile::default()
    };
    let mut scratch = Scratch::default();
    for seed in 0..n {
        let name = format!("s{swing_deg}-f{}-fps{fps}-{seed}", flicker.is_some());
        let trial = synth::generate(&name, TrialKind::Normal, &config, &rig, 1000 + seed);
        let shutter: f64 = std::env::var("SHUTTER")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(0.0);
        let scene = video::Scene {
            swing_rad: swing_deg.to_radians(),
            flicker,
            shutter,
            seed,
            ..video::Scene::default()
        };
        let record = analyze_rendered(&trial, &scene, &rig, &root.join(&name), &mut scratch)?;
        let score = score_rendered(&record, &trial.truth, fps);
        row.trials += 1;
        match score.measure.as_deref() {
            Some("pca1") => row.pca += 1,
            Some(_) => row.tracked += 1,
            None => eprintln!("{name}: {:?}", record.error),
        }
        if let Some(err) = score.release_frames {
            row.release_err.push(err.unwrap_or(f64::INFINITY));
        }
        if let Some(Some(err)) = score.motion_peak_frames {
            row.peak_err.push(err.abs());
        }
        if let Some(ok) = score.loading_ok {
            row.loading_n += 1;
            row.loading_ok += usize::from(ok);
        }
        if let Some(ok) = score.frequency_ok {
            row.freq_n += 1;
            row.freq_ok += usize::from(ok);
        }
    }
    Ok(row)
}
