//! `latchtime inspect`: runs one stage of the pipeline on raw arrays and writes what it
//! computed, so that outside reference libraries can be fed the same numbers
//! (`tests/reference/`). Arrays travel as raw little-endian f64 files; results as JSON.

use std::path::{Path, PathBuf};

use clap::{Args, Subcommand};
use serde_json::json;

use crate::decode;
use crate::detect::{click, filter, oscillation};
use crate::error::{Error, Result};
use crate::report::groups;

#[derive(Subcommand, Debug)]
pub enum Stage {
    /// Decode one channel of an audio file (samples scaled to full scale 1.0).
    Decode {
        #[arg(long)]
        audio: PathBuf,
        #[arg(long, default_value_t = 0)]
        channel: usize,
        /// Raw little-endian f64 output.
        #[arg(long)]
        out: PathBuf,
    },
    /// The click detector's 4th-order Butterworth high-pass, zero-phase (or causal).
    Highpass {
        #[command(flatten)]
        io: ArrayIo,
        #[arg(long)]
        sample_rate_hz: f64,
        #[arg(long)]
        corner_hz: f64,
        /// Forward only, from steady state (as used for onset picking).
        #[arg(long)]
        causal: bool,
    },
    /// The AIC onset picker on a whole array.
    Aic {
        #[arg(long)]
        input: PathBuf,
    },
    /// The damped-oscillation fit, from a start found by the log decrement of the extrema.
    Fit {
        /// Samples of the oscillation starting at its first extremum.
        #[arg(long)]
        input: PathBuf,
        #[arg(long)]
        fps: f64,
        /// Per-frame noise standard deviation for the extremum hysteresis.
        #[arg(long)]
        noise: f64,
    },
    /// Group statistics of an array.
    Stats {
        #[arg(long)]
        input: PathBuf,
    },
    /// Decode a video and give each frame's index and the sum of its luma.
    VideoSums {
        #[arg(long)]
        video: PathBuf,
    },
}

#[derive(Args, Debug)]
pub struct ArrayIo {
    /// Raw little-endian f64 input.
    #[arg(long)]
    input: PathBuf,
    /// Raw little-endian f64 output.
    #[arg(long)]
    out: PathBuf,
}

fn read_f64(path: &Path) -> Result<Vec<f64>> {
    let bytes = decode::read_input(path)?;
    if bytes.len() % 8 != 0 {
        return Err(Error::malformed(
            path,
            "length is not a multiple of 8 bytes (raw f64)",
        ));
    }
    Ok(bytes
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes([c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]]))
        .collect())
}

fn write_f64(path: &Path, values: &[f64]) -> Result<()> {
    let bytes: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    std::fs::write(path, bytes).map_err(|e| Error::io(path, e))
}

/// Runs a stage and returns the JSON to print.
pub fn run(stage: &Stage) -> Result<serde_json::Value> {
    match stage {
        Stage::Decode {
            audio,
            channel,
            out,
        } => {
            let bytes = decode::read_input(audio)?;
            let s = decode::decode_audio(audio, &bytes, *channel)?;
            write_f64(out, &s.samples)?;
            Ok(json!({
                "sample_rate_hz": s.sample_rate_hz,
                "channels": s.channels,
                "frames": s.samples.len(),
                "bits_per_sample": s.bits_per_sample,
            }))
        }
        Stage::Highpass {
            io,
            sample_rate_hz,
            corner_hz,
            causal,
        } => {
            let x = read_f64(&io.input)?;
            let sections = filter::butterworth_highpass(4, *corner_hz, *sample_rate_hz);
            let y = if *causal {
                filter::filter_causal(&sections, &x)
            } else {
                filter::filtfilt(&sections, &x)
            };
            write_f64(&io.out, &y)?;
            let sos: Vec<[f64; 6]> = sections
                .iter()
                .map(|s| [s.b[0], s.b[1], s.b[2], 1.0, s.a[0], s.a[1]])
                .collect();
            Ok(json!({ "sos": sos, "samples": y.len() }))
        }
        Stage::Aic { input } => {
            let x = read_f64(input)?;
            Ok(json!({ "onset_index": click::aic_onset(&x) }))
        }
        Stage::Fit { input, fps, noise } => {
            let y = read_f64(input)?;
            if y.len() < 16 || fps.is_nan() || *fps <= 0.0 {
                return Err(Error::Usage(
                    "fit needs at least 16 samples and a positive --fps".into(),
                ));
            }
            let t: Vec<f64> = (0..y.len()).map(|k| k as f64 / fps).collect();
            let direction = if y[0] >= y[y.len() - 1] { 1.0 } else { -1.0 };
            let found = oscillation::detect_oscillation(
                &t,
                &y,
                0,
                (t[0], y[0]),
                direction,
                *noise,
                1.0 / fps,
            );
            Ok(match found {
                Some((o, first)) => json!({
                    "frequency_hz": o.frequency_hz,
                    "amplitude_ratio": o.amplitude_ratio,
                    "amplitude_ratio_sd": o.amplitude_ratio_sd,
                    "first_extremum_s": first.map(|f| f.0),
                }),
                None => json!(null),
            })
        }
        Stage::Stats { input } => {
            let x = read_f64(input)?;
            Ok(serde_json::to_value(groups::stats(&x)).unwrap_or(serde_json::Value::Null))
        }
        Stage::VideoSums { video } => video_sums(video),
    }
}

/// Each frame's index and luma sum (f64, exact for 8-bit frames up to 2^53 / 255 pixels).
fn video_sums(path: &Path) -> Result<serde_json::Value> {
    let mut source = decode::video::open(path)?;
    let mut frames = Vec::new();
    while let Some(f) = source.next_frame()? {
        let sum: f64 = f.luma.iter().map(|&v| f64::from(v)).sum();
        frames.push(json!({ "index": f.index, "luma_sum": sum }));
    }
    let info = source.info();
    Ok(json!({
        "format": info.format,
        "container_fps": info.container_fps,
        "frames": frames,
    }))
}
