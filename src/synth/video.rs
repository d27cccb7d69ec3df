//! Rendered video with truth: a bar swinging about a pivot over a textured background, its
//! angle following a synthetic trial's motion measure (so the trial's truth - loading onset,
//! release, motion peak, oscillation - holds for the video), with camera noise and optional
//! lamp flicker. Pixels are 8-bit grey levels (0-255) as floats; edges are anti-aliased by
//! the share of each pixel the bar covers (a one-pixel linear ramp).

use std::path::Path;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

use super::SynthTrial;
use crate::error::Error;

/// What the camera sees.
#[derive(Debug, Clone, PartialEq)]
pub struct Scene {
    pub width: usize,
    pub height: usize,
    /// Joint of the bar, pixels.
    pub pivot_px: (f64, f64),
    pub bar_length_px: f64,
    pub bar_width_px: f64,
    /// Angle of the bar while held, radians (image axes: x right, y down).
    pub rest_angle_rad: f64,
    /// Angle turned from the held position to the motion's largest excursion, radians.
    pub swing_rad: f64,
    /// Camera noise standard deviation, grey levels.
    pub noise_grey: f64,
    /// Lamp flicker: frequency (Hz) and depth (gain 1 +- depth).
    pub flicker: Option<(f64, f64)>,
    /// Exposure as a share of the frame period (0: none; 0.5: a 180-degree shutter). The
    /// exposure is centred on the frame's time, and the bar is drawn at 8 angles across it,
    /// interpolated between frames: motion blur.
    pub shutter: f64,
    pub seed: u64,
}

impl Default for Scene {
    /// A 160 x 120 picture, a 70 px bar 9 px wide turning 30 degrees, noise of 2 grey levels.
    fn default() -> Self {
        Scene {
            width: 160,
            height: 120,
            pivot_px: (40.0, 60.0),
            bar_length_px: 70.0,
            bar_width_px: 9.0,
            rest_angle_rad: -0.25,
            swing_rad: 30f64.to_radians(),
            noise_grey: 2.0,
            flicker: None,
            shutter: 0.0,
            seed: 1,
        }
    }
}

/// The static background: smooth blobs of many sizes between grey levels of about 60 and 140.
pub fn background(scene: &Scene) -> Vec<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(scene.seed ^ 0xb10b);
    let blobs: Vec<(f64, f64, f64, f64)> = (0..(scene.width * scene.height / 60).max(8))
        .map(|_| {
            (
                rng.gen_range(0.0..scene.width as f64),
                rng.gen_range(0.0..scene.height as f64),
                rng.gen_range(1.5..6.0),
                rng.gen_range(-30.0..30.0),
            )
        })
        .collect();
    let mut out = vec![100.0f32; scene.width * scene.height];
    for &(cx, cy, s, a) in &blobs {
        let reach = (3.0 * s).ceil() as isize;
        let (x0, y0) = (cx as isize - reach, cy as isize - reach);
        for y in y0.max(0)..(y0 + 2 * reach + 1).min(scene.height as isize) {
            for x in x0.max(0)..(x0 + 2 * reach + 1).min(scene.width as isize) {
                let d2 = (x as f64 - cx).powi(2) + (y as f64 - cy).powi(2);
                out[y as usize * scene.width + x as usize] +=
                    (a * (-d2 / (2.0 * s * s)).exp()) as f32;
            }
        }
    }
    out
}

/// Brightness of the bar at distance `u` from the pivot along it: light, with dark bands
/// across it every 14 px (marks a tracker can hold on to).
fn bar_grey(u: f64) -> f64 {
    if u.rem_euclid(14.0) < 5.0 {
        70.0
    } else {
        215.0
    }
}

/// The picture with the bar at `angle_rad`, before lamp and noise.
pub fn draw(scene: &Scene, background: &[f32], angle_rad: f64) -> Vec<f32> {
    let mut img = background.to_vec();
    let (c, s) = (angle_rad.cos(), angle_rad.sin());
    let (px, py) = scene.pivot_px;
    let half = 0.5 * scene.bar_width_px;
    let len = scene.bar_length_px;
    let reach = len + half + 2.0;
    let (x0, x1) = ((px - reach).floor().max(0.0), (px + reach).ceil());
    let (y0, y1) = ((py - reach).floor().max(0.0), (py + reach).ceil());
    for y in y0 as usize..(y1 as usize).min(scene.height) {
        for x in x0 as usize..(x1 as usize).min(scene.width) {
            let (dx, dy) = (x as f64 - px, y as f64 - py);
            let u = dx * c + dy * s;
            let v = -dx * s + dy * c;
            let cover = (half - v.abs() + 0.5).clamp(0.0, 1.0)
                * (len - u + 0.5).clamp(0.0, 1.0)
                * (u + half + 0.5).clamp(0.0, 1.0);
            if cover > 0.0 {
                let i = y * scene.width + x;
                img[i] = (f64::from(img[i]) * (1.0 - cover) + bar_grey(u) * cover) as f32;
            }
        }
    }
    img
}

/// The bar's angle at each frame of `trial`: (frame index, time_s, angle_rad). The held level
/// is the first frame's value; the largest excursion from it turns the bar by `swing_rad`.
pub fn angles(trial: &SynthTrial, scene: &Scene) -> Vec<(usize, f64, f64)> {
    let Some(frames) = trial.frames.as_ref() else {
        return Vec::new();
    };
    let held = frames.first().map_or(0.0, |f| f.2);
    let far = frames
        .iter()
        .map(|f| (f.2 - held).abs())
        .fold(0.0, f64::max)
        .max(1e-12);
    frames
        .iter()
        .map(|&(k, t, v)| {
            (
                k,
                t,
                scene.rest_angle_rad + scene.swing_rad * (v - held) / far,
            )
        })
        .collect()
}

/// Sub-frame angles across a centred exposure of `shutter` frame periods at frame `i`,
/// interpolated linearly between the frames' angles.
fn exposure_angles(angles: &[(usize, f64, f64)], i: usize, shutter: f64) -> Vec<f64> {
    const SUB: usize = 8;
    let at = |pos: f64| {
        let last = angles.len().saturating_sub(1);
        let p = pos.clamp(0.0, last as f64);
        let (j, f) = (p.floor() as usize, p - p.floor());
        let next = angles[(j + 1).min(last)].2;
        angles[j].2 * (1.0 - f) + next * f
    };
    if shutter <= 0.0 {
        return vec![angles[i].2];
    }
    (0..SUB)
        .map(|s| at(i as f64 + shutter * ((s as f64 + 0.5) / SUB as f64 - 0.5)))
        .collect()
}

/// Renders every frame of `trial`: (frame index, grey levels clamped to 0-255).
pub fn render(trial: &SynthTrial, scene: &Scene) -> impl Iterator<Item = (usize, Vec<f32>)> {
    let bg = background(scene);
    let mut rng = ChaCha8Rng::seed_from_u64(scene.seed);
    // None only for a spread that is not a number: no noise then.
    let noise = Normal::new(0.0, scene.noise_grey.max(0.0)).ok();
    let scene = scene.clone();
    let angles = angles(trial, &scene);
    (0..angles.len()).map(move |i| {
        let (k, t, _) = angles[i];
        let gain = scene.flicker.map_or(1.0, |(hz, depth)| {
            1.0 + depth * (std::f64::consts::TAU * hz * t).sin()
        });
        let subs = exposure_angles(&angles, i, scene.shutter);
        let mut img = vec![0.0f32; bg.len()];
        for a in &subs {
            for (o, v) in img.iter_mut().zip(draw(&scene, &bg, *a)) {
                *o += v / subs.len() as f32;
            }
        }
        let img = img
            .into_iter()
            .map(|v| {
                let n = noise.map_or(0.0, |d| d.sample(&mut rng));
                (f64::from(v) * gain + n).clamp(0.0, 255.0) as f32
            })
            .collect();
        (k, img)
    })
}

/// A binary PGM (P5) of grey levels, 8-bit (`maxval` 255) or 16-bit (values scaled by
/// `maxval / 255`).
pub fn pgm_bytes(width: usize, height: usize, grey: &[f32], maxval: u16) -> Vec<u8> {
    let mut out = format!("P5\n{width} {height}\n{maxval}\n").into_bytes();
    let scale = f32::from(maxval) / 255.0;
    for &v in grey {
        let q = (v * scale).round().clamp(0.0, f32::from(maxval)) as u16;
        if maxval > 255 {
            out.extend(q.to_be_bytes());
        } else {
            out.push(q as u8);
        }
    }
    out
}

/// Renders every frame of `trial` into `dir` (created if missing) as an 8-bit PGM sequence,
/// `f_000000.pgm` on, named by frame index; returns the number of frames written.
pub fn write_pgm_sequence(dir: &Path, trial: &SynthTrial, scene: &Scene) -> Result<usize, Error> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let mut written = 0;
    for (k, img) in render(trial, scene) {
        let path = dir.join(format!("f_{k:06}.pgm"));
        let bytes = pgm_bytes(scene.width, scene.height, &img, 255);
        std::fs::write(&path, bytes).map_err(|e| Error::io(&path, e))?;
        written += 1;
    }
    Ok(written)
}
