//! Synthetic trials with known truth, for tests, benchmarks and the shipped sample data.
//!
//! Video: a per-frame measure with a baseline and Gaussian noise, a linear loading drift from
//! loading onset to release, a half-cosine fast phase from release to motion peak (a spring
//! released from rest reaches its first extremum half a period later), then the free response
//! of a viscously damped oscillator from rest, x = A e^{-s t}(cos wd t + s/wd sin wd t), whose
//! per-cycle amplitude ratio and damped frequency are known.
//! Audio: Gaussian noise, optional mains hum with a third harmonic, DC offset, low-frequency
//! handling thumps (Hann-windowed 40-90 Hz bursts: not clicks), and a broadband click (fast
//! attack, decaying resonances plus a noise burst) at the audio time the clock relation gives.

use std::f64::consts::PI;
use std::path::Path;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::measure::{Flag, Oscillation};
use crate::rig::RigProfile;

/// What a synthetic trial shows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TrialKind {
    Normal,
    DoubleClick,
    /// Loads, relaxes, never fires.
    Failed,
    /// Nothing happens.
    Empty,
    /// The click runs into full scale.
    Clipped,
    /// The click is heard far from where the clock relation puts it.
    OutOfSync,
}

impl TrialKind {
    /// Every kind, in the order `synth` cycles through them.
    pub const ALL: [TrialKind; 6] = [
        TrialKind::Normal,
        TrialKind::DoubleClick,
        TrialKind::Failed,
        TrialKind::Empty,
        TrialKind::Clipped,
        TrialKind::OutOfSync,
    ];

    /// Name used in file names and truth files.
    pub fn as_str(self) -> &'static str {
        match self {
            TrialKind::Normal => "normal",
            TrialKind::DoubleClick => "double_click",
            TrialKind::Failed => "failed",
            TrialKind::Empty => "empty",
            TrialKind::Clipped => "clipped",
            TrialKind::OutOfSync => "out_of_sync",
        }
    }

    /// Parses a kind name.
    pub fn parse(s: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|k| k.as_str() == s)
    }

    /// Flags a correct analysis raises for this kind.
    pub fn expected_flags(self) -> Vec<Flag> {
        match self {
            TrialKind::Normal => vec![],
            TrialKind::DoubleClick => vec![Flag::DoubleClick],
            TrialKind::Failed => vec![Flag::NoClick, Flag::NoRelease],
            TrialKind::Empty => vec![Flag::NoClick, Flag::NoLoading, Flag::NoRelease],
            TrialKind::Clipped => vec![Flag::Clipped],
            TrialKind::OutOfSync => vec![Flag::SyncMismatch],
        }
    }
}

/// Audio sample encoding of a synthetic WAV.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SampleEncoding {
    Int16,
    Int24,
    Float32,
}

/// Recording settings shared by a synthetic campaign.
#[derive(Debug, Clone, PartialEq)]
pub struct SynthConfig {
    pub sample_rate_hz: u32,
    pub fps: f64,
    pub duration_s: f64,
    pub encoding: SampleEncoding,
    pub channels: u16,
    /// Write audio (false: video-only trials).
    pub audio: bool,
    /// Write frames (false: audio-only trials).
    pub frames: bool,
    /// Mains hum frequency, Hz (0: none).
    pub hum_hz: f64,
    /// Frames left out of the frame CSV (dropped by the camera), away from the fast phase.
    pub dropped_frames: usize,
    /// Click peak over noise RMS, dB, drawn uniformly from this range; `None`: noise at
    /// -62 dBFS RMS and a click peak of -14 to -6 dBFS (about 50 dB).
    pub click_snr_db: Option<(f64, f64)>,
    /// Per-frame noise of the motion measure, in its units (the jump is 40-70 units).
    pub video_noise: f64,
    /// Real-world variety: a latch that creeps before it snaps (half the trials), overdamped
    /// releases without overshoot (one in six), loading drifts that start gently (exponent
    /// 1-1.4 instead of a straight line).
    pub variety: bool,
    /// Timestamps printed to this many significant digits (rounded, as exporters do).
    pub timestamp_digits: Option<u32>,
}

impl Default for SynthConfig {
    fn default() -> Self {
        SynthConfig {
            sample_rate_hz: 96_000,
            fps: 1000.0,
            duration_s: 0.4,
            encoding: SampleEncoding::Int16,
            channels: 1,
            audio: true,
            frames: true,
            hum_hz: 50.0,
            dropped_frames: 0,
            click_snr_db: None,
            video_noise: 0.5,
            variety: false,
            timestamp_digits: None,
        }
    }
}

/// The true values of a synthetic trial, with the record's field names.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Truth {
    pub trial: String,
    pub kind: TrialKind,
    pub flags: Vec<Flag>,
    pub click_onset_s: Option<f64>,
    pub clicks_s: Option<Vec<f64>>,
    pub loading_onset_s: Option<f64>,
    pub latch_release_s: Option<f64>,
    pub motion_peak_s: Option<f64>,
    pub loading_ms: Option<f64>,
    pub release_ms: Option<f64>,
    pub amplification_lossless: Option<f64>,
    pub efficiency: Option<f64>,
    pub amplification: Option<f64>,
    pub oscillation: Option<Oscillation>,
    pub audio_sample_rate_hz: Option<f64>,
    pub video_fps: Option<f64>,
    /// Click peak over noise RMS as synthesised, dB.
    pub click_snr_db: Option<f64>,
    /// The second click's peak over noise RMS (double-click kind), dB.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub second_click_snr_db: Option<f64>,
    /// How far the click was moved off the clock relation (out-of-sync kind), ms.
    pub sync_slip_ms: Option<f64>,
    /// The release overshoots into an oscillation (false: overdamped).
    pub overshoot: Option<bool>,
}

/// A generated trial, ready to write.
#[derive(Debug, Clone)]
pub struct SynthTrial {
    pub name: String,
    /// Interleaved samples, 1.0 = full scale.
    pub audio: Option<Vec<f64>>,
    pub channels: u16,
    pub sample_rate_hz: u32,
    pub encoding: SampleEncoding,
    /// (frame index, time_s, value) per frame.
    pub frames: Option<Vec<(usize, f64, f64)>>,
    pub truth: Truth,
}

/// Generates one trial of `kind` with random but plausible parameters drawn from `seed`.
pub fn generate(
    name: &str,
    kind: TrialKind,
    config: &SynthConfig,
    rig: &RigProfile,
    seed: u64,
) -> SynthTrial {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let fps = config.fps;
    let n_frames = (config.duration_s * fps).round().max(16.0) as usize;
    let duration_s = n_frames as f64 / fps;
    // Event times: release in the second half, loading 40-150 ms before it.
    let release_s = duration_s * rng.gen_range(0.5..0.6) + rng.gen_range(0.0..1.0) / fps;
    let loading_ms = rng.gen_range(40.0..150.0f64).min(release_s * 1e3 * 0.8);
    let loading_onset_s = release_s - loading_ms * 1e-3;
    let release_ms = rng.gen_range(2.0..6.0f64).max(4.0e3 / fps);
    let peak_s = release_s + release_ms * 1e-3;
    let freq_hz = rng.gen_range(40.0..120.0f64).min(fps / 10.0);
    let ratio: f64 = rng.gen_range(0.35..0.8);
    let sign = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
    let baseline = rng.gen_range(80.0..160.0);
    let jump = sign * rng.gen_range(40.0..70.0);
    let drift = -jump * rng.gen_range(0.15..0.3);
    let osc_amp = jump * rng.gen_range(0.25..0.4);
    let video_noise =
        Normal::new(0.0, config.video_noise.max(0.0)).expect("noise level is not negative");
    let s = -ratio.ln() * freq_hz;
    let wd = 2.0 * PI * freq_hz;
    let fires = !matches!(kind, TrialKind::Failed | TrialKind::Empty);
    let loads = kind != TrialKind::Empty;
    let relax_tau_s = rng.gen_range(0.02..0.05);
    let (creep_s, creep, overshoot, bend) = if config.variety {
        (
            if rng.gen_bool(0.5) {
                rng.gen_range(1e-3..3e-3)
            } else {
                0.0
            },
            jump * rng.gen_range(0.02..0.04),
            !rng.gen_bool(1.0 / 6.0),
            rng.gen_range(1.0..1.4),
        )
    } else {
        (0.0, 0.0, true, 1.0)
    };
    let y_release = baseline + drift + if creep_s > 0.0 { creep } else { 0.0 };
    let value_at = |t: f64| -> f64 {
        if !loads || t < loading_onset_s {
            baseline
        } else if t < release_s {
            let u: f64 = (t - loading_onset_s) / (release_s - loading_onset_s);
            let creeping = if creep_s > 0.0 && t > release_s - creep_s {
                creep * (t - (release_s - creep_s)) / creep_s
            } else {
                0.0
            };
            baseline + drift * u.powf(bend) + if fires { creeping } else { 0.0 }
        } else if !fires {
            baseline + drift * (-(t - release_s) / relax_tau_s).exp()
        } else if t < peak_s {
            y_release + 0.5 * jump * (1.0 - (PI * (t - release_s) / (peak_s - release_s)).cos())
        } else if !overshoot {
            y_release + jump
        } else {
            let tau = t - peak_s;
            y_release + jump - osc_amp
                + osc_amp * (-s * tau).exp() * ((wd * tau).cos() + s / wd * (wd * tau).sin())
        }
    };
    let mut frames: Vec<(usize, f64, f64)> = (0..n_frames)
        .map(|k| {
            let t = k as f64 / fps;
            (k, t, value_at(t) + video_noise.sample(&mut rng))
        })
        .collect();
    for _ in 0..config.dropped_frames.min(n_frames / 4) {
        // Drop in the first 40 % of the record, before loading starts in most trials.
        let at = rng.gen_range(2..(frames.len() * 2 / 5).max(3));
        frames.remove(at);
    }

    // Audio.
    let fs = f64::from(config.sample_rate_hz);
    let n_samples = (duration_s * fs).round() as usize;
    let click_amp = if kind == TrialKind::Clipped {
        2.5
    } else {
        rng.gen_range(0.2..0.5)
    };
    let (noise_rms, click_snr_db) = match config.click_snr_db {
        Some((lo, hi)) if kind != TrialKind::Clipped => {
            let snr = if hi > lo { rng.gen_range(lo..hi) } else { lo };
            (click_amp / 10f64.powf(snr / 20.0), snr)
        }
        _ => {
            let rms = 10f64.powf(-62.0 / 20.0);
            (rms, 20.0 * (click_amp.min(1.0) / rms).log10())
        }
    };
    let noise = Normal::new(0.0, noise_rms).expect("noise level is positive");
    let hum_amp = 10f64.powf(-32.0 / 20.0);
    let dc = rng.gen_range(-0.01..0.01);
    let hum_phase = rng.gen_range(0.0..2.0 * PI);
    let mut audio: Vec<f64> = (0..n_samples)
        .map(|i| {
            let t = i as f64 / fs;
            let hum = if config.hum_hz > 0.0 {
                hum_amp
                    * ((2.0 * PI * config.hum_hz * t + hum_phase).sin()
                        + 0.3 * (2.0 * PI * 3.0 * config.hum_hz * t).sin())
            } else {
                0.0
            };
            dc + hum + noise.sample(&mut rng)
        })
        .collect();
    let slip_s = if kind == TrialKind::OutOfSync {
        let sign = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
        sign * rng.gen_range(5e-3..20e-3f64).max(6.0 / fps)
    } else {
        0.0
    };
    let click_s = rig.audio_time_s(release_s) + slip_s;
    let mut clicks = Vec::new();
    let mut second_click_snr_db = None;
    if fires {
        let amp = click_amp;
        add_click(&mut audio, fs, click_s, amp, &mut rng);
        clicks.push(click_s);
        if kind == TrialKind::DoubleClick {
            let second_s = click_s + rng.gen_range(8e-3..25e-3);
            let level_db: f64 = rng.gen_range(-8.0..-3.0);
            add_click(
                &mut audio,
                fs,
                second_s,
                amp * 10f64.powf(level_db / 20.0),
                &mut rng,
            );
            clicks.push(second_s);
            second_click_snr_db = Some(click_snr_db + level_db);
        }
    }
    // Handling thumps, kept 40 ms clear of clicks so the truth stays unambiguous.
    for _ in 0..rng.gen_range(1..=2) {
        let at = rng.gen_range(0.02..(duration_s - 0.08).max(0.03));
        if clicks.iter().any(|c| at < c + 0.04 && at + 0.06 > c - 0.04) {
            continue;
        }
        let f = rng.gen_range(40.0..90.0);
        let len_s = rng.gen_range(0.03..0.06);
        let a = rng.gen_range(0.05..0.2);
        let start = (at * fs) as usize;
        let len = (len_s * fs) as usize;
        for (j, v) in audio.iter_mut().skip(start).take(len).enumerate() {
            let u = j as f64 / len as f64;
            let w = 0.5 - 0.5 * (2.0 * PI * u).cos();
            *v += a * w * (2.0 * PI * f * j as f64 / fs).sin();
        }
    }
    let full = match config.encoding {
        SampleEncoding::Int16 => 32767.0 / 32768.0,
        SampleEncoding::Int24 => 8_388_607.0 / 8_388_608.0,
        SampleEncoding::Float32 => 1.0,
    };
    for v in audio.iter_mut() {
        *v = v.clamp(-full, full);
    }
    let channels = config.channels.max(1);
    let interleaved = if channels == 1 {
        audio
    } else {
        // Further channels: a second microphone, 6 dB down with its own noise.
        let mut out = Vec::with_capacity(audio.len() * usize::from(channels));
        for v in &audio {
            out.push(*v);
            for _ in 1..channels {
                out.push((0.5 * v + noise.sample(&mut rng)).clamp(-full, full));
            }
        }
        out
    };

    let oscillation =
        (fires && overshoot).then(|| crate::detect::oscillation::from_ratio(freq_hz, ratio, 0));
    let has_audio = config.audio;
    let has_frames = config.frames;
    let efficiency = oscillation.as_ref().map(|o| o.energy_retention);
    let truth = Truth {
        trial: name.to_string(),
        kind,
        flags: {
            let mut f: Vec<Flag> = kind
                .expected_flags()
                .into_iter()
                .chain((has_frames && config.dropped_frames > 0).then_some(Flag::FrameGaps))
                .chain(
                    (has_audio && fires && click_snr_db < rig.low_snr_db).then_some(Flag::LowSnr),
                )
                .filter(|f| match f {
                    Flag::NoClick | Flag::DoubleClick | Flag::Clipped => has_audio,
                    Flag::NoLoading | Flag::NoRelease => has_frames,
                    Flag::SyncMismatch => has_audio && has_frames,
                    _ => true,
                })
                .collect();
            f.sort();
            f
        },
        click_onset_s: (has_audio && fires).then_some(click_s),
        clicks_s: has_audio.then(|| clicks.clone()),
        loading_onset_s: (has_frames && loads).then_some(loading_onset_s),
        latch_release_s: (has_frames && fires).then_some(release_s),
        motion_peak_s: (has_frames && fires).then_some(peak_s),
        loading_ms: (has_frames && fires).then_some(loading_ms),
        release_ms: (has_frames && fires).then_some(release_ms),
        amplification_lossless: (has_frames && fires).then_some(loading_ms / release_ms),
        efficiency: efficiency.filter(|_| has_frames),
        amplification: efficiency
            .filter(|_| has_frames)
            .map(|e| e * loading_ms / release_ms),
        oscillation: oscillation.filter(|_| has_frames),
        audio_sample_rate_hz: has_audio.then_some(fs),
        video_fps: has_frames.then_some(fps),
        click_snr_db: (has_audio && fires).then_some(click_snr_db),
        second_click_snr_db: second_click_snr_db.filter(|_| has_audio),
        sync_slip_ms: (kind == TrialKind::OutOfSync).then_some(slip_s * 1e3),
        overshoot: (has_frames && fires).then_some(overshoot),
    };
    SynthTrial {
        name: name.to_string(),
        audio: has_audio.then_some(interleaved),
        channels,
        sample_rate_hz: config.sample_rate_hz,
        encoding: config.encoding,
        frames: has_frames.then_some(frames),
        truth,
    }
}

/// Adds a click with peak magnitude `amp` whose first sample is at or after `at_s`.
fn add_click(audio: &mut [f64], fs: f64, at_s: f64, amp: f64, rng: &mut ChaCha8Rng) {
    let start = (at_s * fs).ceil() as usize;
    let top = (0.4 * fs).min(20_000.0);
    let modes: Vec<(f64, f64, f64)> = (0..3)
        .map(|_| {
            (
                rng.gen_range(3000.0..top),
                rng.gen_range(0.3..1.0),
                rng.gen_range(0.2e-3..0.6e-3),
            )
        })
        .collect();
    let len = (4e-3 * fs) as usize;
    let burst = Normal::new(0.0, 1.0).expect("constant standard deviation is valid");
    let attack_s = 20e-6;
    let mut shape: Vec<f64> = (0..len)
        .map(|j| {
            let tau = (start + j) as f64 / fs - at_s;
            let rise = 1.0 - (-tau / attack_s).exp();
            let ring: f64 = modes
                .iter()
                .map(|(f, a, d)| a * (-tau / d).exp() * (2.0 * PI * f * tau).sin())
                .sum();
            let hiss = 0.5 * (-tau / 0.15e-3).exp() * burst.sample(rng);
            rise * (ring + hiss)
        })
        .collect();
    let peak = shape.iter().fold(0.0f64, |m, v| m.max(v.abs())).max(1e-12);
    for v in shape.iter_mut() {
        *v *= amp / peak;
    }
    for (v, c) in audio.iter_mut().skip(start).zip(shape) {
        *v += c;
    }
}

/// The trial's audio as WAV file bytes.
pub fn wav_bytes(trial: &SynthTrial) -> Option<Vec<u8>> {
    let audio = trial.audio.as_ref()?;
    let (bits, format) = match trial.encoding {
        SampleEncoding::Int16 => (16, hound::SampleFormat::Int),
        SampleEncoding::Int24 => (24, hound::SampleFormat::Int),
        SampleEncoding::Float32 => (32, hound::SampleFormat::Float),
    };
    let spec = hound::WavSpec {
        channels: trial.channels,
        sample_rate: trial.sample_rate_hz,
        bits_per_sample: bits,
        sample_format: format,
    };
    let mut cursor =
        std::io::Cursor::new(Vec::with_capacity(audio.len() * usize::from(bits / 8) + 64));
    {
        // Writing to memory cannot fail for I/O reasons; hound only errors on bad specs.
        let mut w = hound::WavWriter::new(&mut cursor, spec).ok()?;
        let scale = 2f64.powi(i32::from(bits) - 1);
        for &v in audio {
            match format {
                hound::SampleFormat::Int => w.write_sample((v * scale).round() as i32),
                hound::SampleFormat::Float => w.write_sample(v as f32),
            }
            .ok()?;
        }
        w.finalize().ok()?;
    }
    Some(cursor.into_inner())
}

/// The trial's frames as CSV text (`frame,time_s,brightness`), timestamps rounded to
/// `timestamp_digits` significant digits when given.
pub fn frames_csv(trial: &SynthTrial, timestamp_digits: Option<u32>) -> Option<String> {
    let frames = trial.frames.as_ref()?;
    let mut text = String::with_capacity(frames.len() * 28);
    text.push_str("frame,time_s,brightness\n");
    for (k, t, y) in frames {
        match timestamp_digits {
            Some(d) if *t > 0.0 => {
                let decimals = (d as i32 - 1 - t.log10().floor() as i32).max(0) as usize;
                text.push_str(&format!("{k},{t:.decimals$},{y:.3}\n"));
            }
            _ => text.push_str(&format!("{k},{t:.7},{y:.3}\n")),
        }
    }
    Some(text)
}

/// Writes `NAME.wav`, `NAME.frames.csv` and `NAME.truth.json` into `dir`.
pub fn write_trial(dir: &Path, trial: &SynthTrial) -> Result<()> {
    write_trial_with(dir, trial, None)
}

/// As [`write_trial`], with timestamps rounded to `timestamp_digits` significant digits.
pub fn write_trial_with(
    dir: &Path,
    trial: &SynthTrial,
    timestamp_digits: Option<u32>,
) -> Result<()> {
    if let Some(bytes) = wav_bytes(trial) {
        let path = dir.join(format!("{}.wav", trial.name));
        std::fs::write(&path, bytes).map_err(|e| Error::io(&path, e))?;
    }
    if let Some(text) = frames_csv(trial, timestamp_digits) {
        let path = dir.join(format!("{}.frames.csv", trial.name));
        std::fs::write(&path, text).map_err(|e| Error::io(&path, e))?;
    }
    let path = dir.join(format!("{}.truth.json", trial.name));
    let json = serde_json::to_string_pretty(&trial.truth)
        .map_err(|e| Error::malformed(&path, e.to_string()))?;
    std::fs::write(&path, json + "\n").map_err(|e| Error::io(&path, e))?;
    Ok(())
}

/// The rig profile of the demo campaign (also shipped as `calibration/demo-rig.json`).
pub const DEMO_RIG_JSON: &str = r#"{
  "fps": 1000.0,
  "video_offset_s": 0.002,
  "mic_distance_m": 0.30,
  "air_temperature_c": 20.0,
  "audio_channel": 0
}
"#;

/// The demo campaign of `sample-audio/`: an invented teaching bench, a leaf-spring latch
/// (rig "LS-2"), fired with three leaf thicknesses (groups), recorded in assorted formats.
pub fn write_demo(dir: &Path) -> Result<()> {
    let rig = RigProfile::from_json(DEMO_RIG_JSON)?;
    let base = SynthConfig::default();
    let mono16 = |sr: u32, fps: f64| SynthConfig {
        sample_rate_hz: sr,
        fps,
        ..base.clone()
    };
    let plan: Vec<(&str, &str, TrialKind, SynthConfig)> = vec![
        (
            "ls2-thin-01",
            "leaf-0.8mm",
            TrialKind::Normal,
            mono16(96_000, 1000.0),
        ),
        (
            "ls2-thin-02",
            "leaf-0.8mm",
            TrialKind::Normal,
            mono16(96_000, 2000.0),
        ),
        (
            "ls2-thin-03",
            "leaf-0.8mm",
            TrialKind::DoubleClick,
            mono16(96_000, 1000.0),
        ),
        (
            "ls2-thin-04",
            "leaf-0.8mm",
            TrialKind::Clipped,
            mono16(96_000, 1000.0),
        ),
        (
            "ls2-thin-05",
            "leaf-0.8mm",
            TrialKind::Normal,
            SynthConfig {
                audio: false,
                ..mono16(96_000, 2000.0)
            },
        ),
        (
            "ls2-mid-01",
            "leaf-1.0mm",
            TrialKind::Normal,
            SynthConfig {
                encoding: SampleEncoding::Int24,
                ..mono16(192_000, 2000.0)
            },
        ),
        (
            "ls2-mid-02",
            "leaf-1.0mm",
            TrialKind::Normal,
            SynthConfig {
                channels: 2,
                ..mono16(96_000, 1000.0)
            },
        ),
        (
            "ls2-mid-03",
            "leaf-1.0mm",
            TrialKind::Failed,
            mono16(96_000, 1000.0),
        ),
        (
            "ls2-mid-04",
            "leaf-1.0mm",
            TrialKind::OutOfSync,
            mono16(96_000, 1000.0),
        ),
        (
            "ls2-mid-05",
            "leaf-1.0mm",
            TrialKind::Normal,
            SynthConfig {
                dropped_frames: 3,
                ..mono16(96_000, 1000.0)
            },
        ),
        (
            "ls2-thick-01",
            "leaf-1.2mm",
            TrialKind::Normal,
            SynthConfig {
                encoding: SampleEncoding::Int24,
                duration_s: 0.3,
                ..mono16(250_000, 5000.0)
            },
        ),
        (
            "ls2-thick-02",
            "leaf-1.2mm",
            TrialKind::Normal,
            SynthConfig {
                encoding: SampleEncoding::Float32,
                hum_hz: 60.0,
                ..mono16(44_100, 1000.0)
            },
        ),
        (
            "ls2-thick-03",
            "leaf-1.2mm",
            TrialKind::Empty,
            mono16(96_000, 1000.0),
        ),
        (
            "ls2-thick-04",
            "leaf-1.2mm",
            TrialKind::Normal,
            SynthConfig {
                frames: false,
                ..mono16(96_000, 1000.0)
            },
        ),
    ];
    let mut manifest = String::from("trial,audio,frames,group\n");
    for (i, (name, group, kind, config)) in plan.iter().enumerate() {
        let trial = generate(name, *kind, config, &rig, 20_261_201 + i as u64);
        write_trial(dir, &trial)?;
        let audio = if config.audio {
            format!("{name}.wav")
        } else {
            String::new()
        };
        let frames = if config.frames {
            format!("{name}.frames.csv")
        } else {
            String::new()
        };
        manifest.push_str(&format!("{name},{audio},{frames},{group}\n"));
    }
    let path = dir.join("manifest.csv");
    std::fs::write(&path, manifest).map_err(|e| Error::io(&path, e))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn generation_is_deterministic_for_a_seed() {
        let rig = RigProfile::default();
        let a = generate("a", TrialKind::Normal, &SynthConfig::default(), &rig, 11);
        let b = generate("a", TrialKind::Normal, &SynthConfig::default(), &rig, 11);
        assert_eq!(a.truth, b.truth);
        assert_eq!(a.audio, b.audio);
        let c = generate("a", TrialKind::Normal, &SynthConfig::default(), &rig, 12);
        assert_ne!(a.truth, c.truth);
    }

    #[test]
    fn clipped_kind_reaches_full_scale_and_normal_does_not() {
        let rig = RigProfile::default();
        let clipped = generate("c", TrialKind::Clipped, &SynthConfig::default(), &rig, 1);
        let full = 32767.0 / 32768.0;
        let at_full = clipped
            .audio
            .as_ref()
            .map_or(0, |a| a.iter().filter(|v| v.abs() >= full).count());
        assert!(at_full > 2);
        let normal = generate("n", TrialKind::Normal, &SynthConfig::default(), &rig, 1);
        assert!(normal
            .audio
            .as_ref()
            .is_some_and(|a| a.iter().all(|v| v.abs() < 0.9)));
    }
}
