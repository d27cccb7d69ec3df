//! Synthetic trials with known truth, for tests, benchmarks, `validate` and the shipped sample
//! data.
//!
//! Each trial is drawn from a [`Family`] (`family.rs`): the original trial (`classic`) or one
//! of the real-world difficulties drawn around it, each a wide distribution.
//! Video (`motion.rs`): a per-frame measure with a baseline and Gaussian noise, a loading drift
//! from loading onset to release (a power law of the time gone, or a drive whose speed ramps up
//! smoothly and then holds), a fast phase from the release to its first extremum (1 - cos: a
//! spring released from rest reaches its first extremum half a period later; smoothstep;
//! skewed; a damped spring; cut short by a hard stop), then the free response of a viscously
//! damped oscillator from rest, x = A e^{-s t}(cos wd t + s/wd sin wd t), whose per-cycle
//! amplitude ratio and damped frequency are known, or ballistic bounces off the stop.
//! Audio: Gaussian noise, optional mains hum with a third harmonic, DC offset, low-frequency
//! handling thumps (Hann-windowed 40-90 Hz bursts: not clicks), and a broadband click (fast
//! attack, decaying resonances plus a noise burst) at the audio time the clock relation gives;
//! in some families ringing clicks and faint latch-set ticks.
//!
//! Truth: the release is the start of the fast phase (after any creep), the motion peak is
//! its first extremum, the loading onset is where the drift starts (before the first frame when
//! the record starts mid-loading), the release click is the earliest click.

use std::f64::consts::PI;
use std::path::Path;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::measure::{Flag, Oscillation};
use crate::rig::RigProfile;

mod family;
mod motion;
pub mod video;

pub use family::{Family, FramesFormat};
pub use motion::ReleaseShape;

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

    /// Whether the latch fires (a release, a click).
    pub fn fires(self) -> bool {
        !matches!(self, TrialKind::Failed | TrialKind::Empty)
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
    /// The family the trial is drawn from (`classic`: the original synthesiser, whose seeds
    /// give the trials they always gave).
    pub family: Family,
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
            family: Family::Classic,
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
    /// The family the trial was drawn from. The fields below are written for the other
    /// families only, so that `classic` truth files stay as they were.
    #[serde(default, skip_serializing_if = "Family::is_classic")]
    pub family: Family,
    /// Shape of the fast phase.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub release_shape: Option<ReleaseShape>,
    /// The loading started before the first frame (`loading_onset_s` is negative).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub loading_before_record: Option<bool>,
    /// Start of the creep before the snap, video clock, seconds. The release is the snap.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub creep_onset_s: Option<f64>,
    /// Steepest slope after the motion peak over the steepest slope of the fast phase,
    /// noise-free. Above 1 a ringing swing is the steepest slope of the trace.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ring_slope_ratio: Option<f64>,
    /// Latch-set ticks, audio clock, seconds: faint transients that are not clicks.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ticks_s: Option<Vec<f64>>,
    /// Starts of the handling thumps (40-90 Hz bursts), audio clock, seconds.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub thumps_s: Option<Vec<f64>>,
    /// The tick's peak over noise RMS, dB.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tick_snr_db: Option<f64>,
    /// Longest decay time constant of the main click's resonances, ms.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub click_decay_ms: Option<f64>,
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
    /// How the frames CSV is written.
    pub format: FramesFormat,
    /// Loading drift over the per-frame noise SD (None when the trial does not load).
    pub drift_sigma: Option<f64>,
    pub truth: Truth,
}

/// Generates one trial of `kind` with random but plausible parameters drawn from `seed`, from
/// the family `config.family`.
pub fn generate(
    name: &str,
    kind: TrialKind,
    config: &SynthConfig,
    rig: &RigProfile,
    seed: u64,
) -> SynthTrial {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let plan = family::draw(config.family, &mut rng, kind, config);
    let frames = sample_frames(&plan, config, &mut rng);
    let duration_s = plan.n_frames as f64 / config.fps;
    let sound = audio_track(&mut rng, kind, config, rig, &plan, duration_s);
    let truth = truth_of(name, kind, config, rig, &plan, &sound);
    let noise = family::noise_scale(config);
    SynthTrial {
        name: name.to_string(),
        audio: config.audio.then_some(sound.samples),
        channels: config.channels.max(1),
        sample_rate_hz: config.sample_rate_hz,
        encoding: config.encoding,
        frames: config.frames.then_some(frames),
        format: plan.format,
        drift_sigma: (kind != TrialKind::Empty).then_some(plan.motion.drift.abs() / noise),
        truth,
    }
}

/// The frames: the motion sampled at `k / fps` with per-frame noise, and the dropped frames
/// left out.
fn sample_frames(
    plan: &family::Plan,
    config: &SynthConfig,
    rng: &mut ChaCha8Rng,
) -> Vec<(usize, f64, f64)> {
    let fps = config.fps;
    let video_noise =
        Normal::new(0.0, config.video_noise.max(0.0)).expect("noise level is not negative");
    let mut frames: Vec<(usize, f64, f64)> = (0..plan.n_frames)
        .map(|k| {
            let t = k as f64 / fps;
            (k, t, plan.motion.value_at(t) + video_noise.sample(rng))
        })
        .collect();
    for _ in 0..config.dropped_frames.min(plan.n_frames / 4) {
        // Drop in the first 40 % of the record, before loading starts in most trials.
        let at = rng.gen_range(2..(frames.len() * 2 / 5).max(3));
        frames.remove(at);
    }
    frames
}

/// The sound of a trial and what it holds.
struct AudioTrack {
    /// Interleaved samples, 1.0 = full scale.
    samples: Vec<f64>,
    clicks_s: Vec<f64>,
    click_snr_db: f64,
    second_click_snr_db: Option<f64>,
    slip_s: f64,
    ticks_s: Vec<f64>,
    tick_snr_db: Option<f64>,
    /// Longest decay time constant of the main click's resonances, ms.
    click_decay_ms: f64,
    /// Starts of the handling thumps, audio clock, seconds.
    thumps_s: Vec<f64>,
}

/// A click's resonances: decay time constants drawn from `decay_s`, `len_s` long.
#[derive(Clone, Copy)]
struct Tone {
    decay_s: (f64, f64),
    len_s: f64,
}

/// The original click: resonances decaying in 0.2-0.6 ms.
const SHORT_TONE: Tone = Tone {
    decay_s: (0.2e-3, 0.6e-3),
    len_s: 4e-3,
};
/// A click that rings: resonances decaying in 1-4 ms, heard for several ms.
const RINGING_TONE: Tone = Tone {
    decay_s: (1e-3, 4e-3),
    len_s: 20e-3,
};
/// A latch-set tick: resonances decaying in 30-100 us.
const TICK_TONE: Tone = Tone {
    decay_s: (0.03e-3, 0.1e-3),
    len_s: 0.6e-3,
};

fn audio_track(
    rng: &mut ChaCha8Rng,
    kind: TrialKind,
    config: &SynthConfig,
    rig: &RigProfile,
    plan: &family::Plan,
    duration_s: f64,
) -> AudioTrack {
    let fs = f64::from(config.sample_rate_hz);
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
    let mut audio = background(rng, config, (duration_s * fs).round() as usize, &noise);
    let slip_s = if kind == TrialKind::OutOfSync {
        let sign = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
        sign * rng.gen_range(5e-3..20e-3f64).max(6.0 / config.fps)
    } else {
        0.0
    };
    let mut track = AudioTrack {
        samples: Vec::new(),
        clicks_s: Vec::new(),
        click_snr_db,
        second_click_snr_db: None,
        slip_s,
        ticks_s: Vec::new(),
        tick_snr_db: None,
        click_decay_ms: 0.0,
        thumps_s: Vec::new(),
    };
    if kind.fires() {
        let click_s = rig.audio_time_s(plan.motion.release_s) + slip_s;
        add_clicks(
            &mut audio, fs, click_s, click_amp, kind, plan.audio, rng, &mut track,
        );
    }
    if plan.audio.ticks && plan.motion.loads {
        add_tick(&mut audio, fs, rig, plan, noise_rms, kind, rng, &mut track);
    }
    let busy: Vec<f64> = track
        .clicks_s
        .iter()
        .chain(&track.ticks_s)
        .copied()
        .collect();
    track.thumps_s = add_thumps(&mut audio, fs, duration_s, &busy, rng);
    track.samples = to_channels(audio, config, &noise, rng);
    track
}

/// Noise, mains hum with a third harmonic, and a DC offset.
fn background(
    rng: &mut ChaCha8Rng,
    config: &SynthConfig,
    n_samples: usize,
    noise: &Normal<f64>,
) -> Vec<f64> {
    let fs = f64::from(config.sample_rate_hz);
    let hum_amp = 10f64.powf(-32.0 / 20.0);
    let dc = rng.gen_range(-0.01..0.01);
    let hum_phase = rng.gen_range(0.0..2.0 * PI);
    (0..n_samples)
        .map(|i| {
            let t = i as f64 / fs;
            let hum = if config.hum_hz > 0.0 {
                hum_amp
                    * ((2.0 * PI * config.hum_hz * t + hum_phase).sin()
                        + 0.3 * (2.0 * PI * 3.0 * config.hum_hz * t).sin())
            } else {
                0.0
            };
            dc + hum + noise.sample(rng)
        })
        .collect()
}

/// The release click and, for the double-click kind, a second click.
#[allow(clippy::too_many_arguments)] // one call site; the arguments are the click's own
fn add_clicks(
    audio: &mut [f64],
    fs: f64,
    click_s: f64,
    amp: f64,
    kind: TrialKind,
    style: family::AudioStyle,
    rng: &mut ChaCha8Rng,
    track: &mut AudioTrack,
) {
    let tone = if style.ringing {
        RINGING_TONE
    } else {
        SHORT_TONE
    };
    track.click_decay_ms = add_click(audio, fs, click_s, amp, tone, rng) * 1e3;
    track.clicks_s.push(click_s);
    if kind != TrialKind::DoubleClick {
        return;
    }
    let (gap_s, level_db) = if style.ringing {
        second_click_placement(rng, amp, kind)
    } else {
        (rng.gen_range(8e-3..25e-3), rng.gen_range(-8.0..-3.0))
    };
    let second_s = click_s + gap_s;
    add_click(
        audio,
        fs,
        second_s,
        amp * 10f64.powf(level_db / 20.0),
        tone,
        rng,
    );
    track.clicks_s.push(second_s);
    track.second_click_snr_db = Some(track.click_snr_db + level_db);
}

/// Where a second click lands after a ringing one, and its level re the first, dB: inside
/// the first's ringing (1.5-6 ms), louder (8-25 ms, up to +6 dB), or tens of ms away
/// (30-80 ms). A louder click stays 0.55 of full scale or under, so only the clipped kind
/// clips.
fn second_click_placement(rng: &mut ChaCha8Rng, amp: f64, kind: TrialKind) -> (f64, f64) {
    let (gap_s, level_db): (f64, f64) = match rng.gen_range(0..3) {
        0 => (rng.gen_range(1.5e-3..6e-3), rng.gen_range(-6.0..3.0)),
        1 => (rng.gen_range(8e-3..25e-3), rng.gen_range(1.0..6.0)),
        _ => (rng.gen_range(30e-3..80e-3), rng.gen_range(-8.0..0.0)),
    };
    let loudest_db = if kind == TrialKind::Clipped {
        f64::INFINITY
    } else {
        20.0 * (0.55 / amp).log10()
    };
    (gap_s, level_db.min(loudest_db))
}

/// A faint tick when the latch is set, 10-80 ms before the loading starts (none when that is
/// before the record). Its SNR is 8-25 dB, and 15 dB or more under the click of a trial that
/// fires, so it never counts as a second click.
#[allow(clippy::too_many_arguments)] // one call site; the arguments are the tick's own
fn add_tick(
    audio: &mut [f64],
    fs: f64,
    rig: &RigProfile,
    plan: &family::Plan,
    noise_rms: f64,
    kind: TrialKind,
    rng: &mut ChaCha8Rng,
    track: &mut AudioTrack,
) {
    let at_video_s = plan.motion.loading_onset_s - rng.gen_range(10e-3..80e-3);
    let mut snr_db: f64 = rng.gen_range(8.0..25.0);
    if kind.fires() {
        snr_db = snr_db.min(track.click_snr_db - 15.0);
    }
    let at_s = rig.audio_time_s(at_video_s);
    if at_video_s < 5e-3 || at_s < 5e-3 {
        return;
    }
    add_click(
        audio,
        fs,
        at_s,
        noise_rms * 10f64.powf(snr_db / 20.0),
        TICK_TONE,
        rng,
    );
    track.ticks_s.push(at_s);
    track.tick_snr_db = Some(snr_db);
}

/// Handling thumps (40-90 Hz bursts), kept 40 ms clear of clicks and ticks so the truth stays
/// unambiguous. Returns their starts, seconds.
fn add_thumps(
    audio: &mut [f64],
    fs: f64,
    duration_s: f64,
    busy_s: &[f64],
    rng: &mut ChaCha8Rng,
) -> Vec<f64> {
    let mut starts = Vec::new();
    for _ in 0..rng.gen_range(1..=2) {
        let at = rng.gen_range(0.02..(duration_s - 0.08).max(0.03));
        if busy_s.iter().any(|c| at < c + 0.04 && at + 0.06 > c - 0.04) {
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
        starts.push(start as f64 / fs);
    }
    starts.sort_by(f64::total_cmp);
    starts
}

/// Clamps to the encoding's full scale and interleaves further channels: a second microphone,
/// 6 dB down with its own noise.
fn to_channels(
    mut audio: Vec<f64>,
    config: &SynthConfig,
    noise: &Normal<f64>,
    rng: &mut ChaCha8Rng,
) -> Vec<f64> {
    let full = match config.encoding {
        SampleEncoding::Int16 => 32767.0 / 32768.0,
        SampleEncoding::Int24 => 8_388_607.0 / 8_388_608.0,
        SampleEncoding::Float32 => 1.0,
    };
    for v in audio.iter_mut() {
        *v = v.clamp(-full, full);
    }
    let channels = config.channels.max(1);
    if channels == 1 {
        return audio;
    }
    let mut out = Vec::with_capacity(audio.len() * usize::from(channels));
    for v in &audio {
        out.push(*v);
        for _ in 1..channels {
            out.push((0.5 * v + noise.sample(rng)).clamp(-full, full));
        }
    }
    out
}

/// The truth of a trial, with the record's field names.
fn truth_of(
    name: &str,
    kind: TrialKind,
    config: &SynthConfig,
    rig: &RigProfile,
    plan: &family::Plan,
    sound: &AudioTrack,
) -> Truth {
    let has_audio = config.audio;
    let has_frames = config.frames;
    let fires = kind.fires();
    let video_fires = has_frames && fires;
    let m = &plan.motion;
    let oscillation = plan
        .ringing
        .filter(|_| fires)
        .map(|(f, ratio)| crate::detect::oscillation::from_ratio(f, ratio, 0));
    let efficiency = oscillation.as_ref().map(|o| o.energy_retention);
    let (loading_ms, release_ms) = (plan.loading_ms, plan.release_ms);
    let new = !config.family.is_classic();
    Truth {
        trial: name.to_string(),
        kind,
        flags: expected_flags(kind, config, rig, sound.click_snr_db),
        click_onset_s: (has_audio && fires).then(|| sound.clicks_s[0]),
        clicks_s: has_audio.then(|| sound.clicks_s.clone()),
        loading_onset_s: (has_frames && m.loads).then_some(m.loading_onset_s),
        latch_release_s: video_fires.then_some(m.release_s),
        motion_peak_s: video_fires.then_some(m.peak_s),
        loading_ms: video_fires.then_some(loading_ms),
        release_ms: video_fires.then_some(release_ms),
        amplification_lossless: video_fires.then_some(loading_ms / release_ms),
        efficiency: efficiency.filter(|_| has_frames),
        amplification: efficiency
            .filter(|_| has_frames)
            .map(|e| e * loading_ms / release_ms),
        oscillation: oscillation.filter(|_| has_frames),
        audio_sample_rate_hz: has_audio.then_some(f64::from(config.sample_rate_hz)),
        video_fps: has_frames.then_some(config.fps),
        click_snr_db: (has_audio && fires).then_some(sound.click_snr_db),
        second_click_snr_db: sound.second_click_snr_db.filter(|_| has_audio),
        sync_slip_ms: (kind == TrialKind::OutOfSync).then_some(sound.slip_s * 1e3),
        overshoot: video_fires.then_some(!matches!(m.after, motion::After::Rest)),
        family: config.family,
        release_shape: (new && video_fires).then(|| m.shape.name()),
        loading_before_record: (new && has_frames && m.loads).then_some(m.loading_onset_s < 0.0),
        creep_onset_s: (new && video_fires).then(|| m.creep_onset_s()).flatten(),
        ring_slope_ratio: (new && video_fires).then(|| m.ring_slope_ratio()).flatten(),
        ticks_s: (new && has_audio && !sound.ticks_s.is_empty()).then(|| sound.ticks_s.clone()),
        tick_snr_db: sound.tick_snr_db.filter(|_| new && has_audio),
        click_decay_ms: (new && has_audio && fires).then_some(sound.click_decay_ms),
        thumps_s: has_audio.then(|| sound.thumps_s.clone()),
    }
}

/// Flags a correct analysis raises for a trial of `kind` recorded as `config` says.
fn expected_flags(
    kind: TrialKind,
    config: &SynthConfig,
    rig: &RigProfile,
    snr_db: f64,
) -> Vec<Flag> {
    let (has_audio, has_frames) = (config.audio, config.frames);
    let mut f: Vec<Flag> = kind
        .expected_flags()
        .into_iter()
        .chain((has_frames && config.dropped_frames > 0).then_some(Flag::FrameGaps))
        .chain((has_audio && kind.fires() && snr_db < rig.low_snr_db).then_some(Flag::LowSnr))
        .filter(|f| match f {
            Flag::NoClick | Flag::DoubleClick | Flag::Clipped => has_audio,
            Flag::NoLoading | Flag::NoRelease => has_frames,
            Flag::SyncMismatch => has_audio && has_frames,
            _ => true,
        })
        .collect();
    f.sort();
    f
}

/// Adds a click with peak magnitude `amp` whose first sample is at or after `at_s`; returns
/// the longest decay time constant of its resonances, s.
fn add_click(
    audio: &mut [f64],
    fs: f64,
    at_s: f64,
    amp: f64,
    tone: Tone,
    rng: &mut ChaCha8Rng,
) -> f64 {
    let start = (at_s * fs).ceil() as usize;
    let top = (0.4 * fs).min(20_000.0);
    let modes: Vec<(f64, f64, f64)> = (0..3)
        .map(|_| {
            (
                rng.gen_range(3000.0..top),
                rng.gen_range(0.3..1.0),
                rng.gen_range(tone.decay_s.0..tone.decay_s.1),
            )
        })
        .collect();
    let len = (tone.len_s * fs) as usize;
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
    modes.iter().fold(0.0f64, |m, (_, _, d)| m.max(*d))
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

/// The trial's frames as CSV text (`frame,time_s,brightness`, or without `frame` when the
/// trial's format says), timestamps rounded to `timestamp_digits` significant digits when
/// given, else as the trial's format says.
pub fn frames_csv(trial: &SynthTrial, timestamp_digits: Option<u32>) -> Option<String> {
    let frames = trial.frames.as_ref()?;
    let format = trial.format;
    let digits = timestamp_digits.or(format.timestamp_digits);
    let dec = format.value_decimals;
    let mut text = String::with_capacity(frames.len() * 28);
    text.push_str(if format.frame_column {
        "frame,time_s,brightness\n"
    } else {
        "time_s,brightness\n"
    });
    for (k, t, y) in frames {
        if format.frame_column {
            text.push_str(&format!("{k},"));
        }
        match digits {
            Some(d) if *t > 0.0 => {
                let decimals = (d as i32 - 1 - t.log10().floor() as i32).max(0) as usize;
                text.push_str(&format!("{t:.decimals$},{y:.dec$}\n"));
            }
            _ => text.push_str(&format!("{t:.7},{y:.dec$}\n")),
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

    fn family_config(family: Family, fps: f64, noise: f64) -> SynthConfig {
        SynthConfig {
            fps,
            family,
            video_noise: noise,
            click_snr_db: Some((10.0, 40.0)),
            ..SynthConfig::default()
        }
    }

    fn trial(family: Family, kind: TrialKind, fps: f64, noise: f64, seed: u64) -> SynthTrial {
        let rig = RigProfile::from_json(DEMO_RIG_JSON).unwrap_or_default();
        generate("t", kind, &family_config(family, fps, noise), &rig, seed)
    }

    /// Signed frame-to-frame steps of the measure over video times `from_s..to_s`.
    fn steps(t: &SynthTrial, from_s: f64, to_s: f64) -> Vec<f64> {
        let frames = t.frames.as_deref().unwrap_or_default();
        frames
            .windows(2)
            .filter(|w| w[0].1 >= from_s && w[1].1 <= to_s)
            .map(|w| w[1].2 - w[0].2)
            .collect()
    }

    #[test]
    fn every_family_and_kind_generates_finite_frames_and_unclipped_audio() {
        for family in Family::ALL {
            for kind in TrialKind::ALL {
                for (k, fps) in [500.0, 4000.0, 15_000.0].into_iter().enumerate() {
                    let t = trial(family, kind, fps, 0.5, 40 + k as u64);
                    let frames = t.frames.as_deref().unwrap_or_default();
                    assert!(frames.len() >= 16, "{family:?} {kind:?}");
                    assert!(
                        frames.iter().all(|f| f.2.is_finite()),
                        "{family:?} {kind:?}"
                    );
                    let loudest = t
                        .audio
                        .as_deref()
                        .unwrap_or_default()
                        .iter()
                        .fold(0.0f64, |m, v| m.max(v.abs()));
                    // Only the clipped kind may reach full scale, else the truth would lie.
                    assert!(
                        kind == TrialKind::Clipped || loudest < 0.99,
                        "{family:?} {kind:?} {loudest}"
                    );
                }
            }
        }
    }

    #[test]
    fn classic_truth_files_carry_no_new_fields() {
        let t = trial(Family::Classic, TrialKind::Normal, 1000.0, 0.5, 3);
        let json = serde_json::to_string(&t.truth).unwrap_or_default();
        for key in [
            "family",
            "release_shape",
            "ticks_s",
            "loading_before_record",
        ] {
            assert!(!json.contains(key), "{key} in {json}");
        }
        let shaped = trial(Family::Shapes, TrialKind::Normal, 1000.0, 0.5, 3);
        let json = serde_json::to_string(&shaped.truth).unwrap_or_default();
        assert!(json.contains("\"family\":\"shapes\""), "{json}");
    }

    #[test]
    fn only_the_hard_stop_bounce_family_is_held_out() {
        let held: Vec<Family> = Family::ALL
            .into_iter()
            .filter(|f| f.is_held_out())
            .collect();
        assert_eq!(held, vec![Family::HardStopBounce]);
        for f in Family::ALL {
            assert_eq!(Family::parse(f.as_str()), Some(f));
        }
    }

    #[test]
    fn rounded_stamps_repeat_at_fifteen_thousand_frames_a_second() {
        let t = trial(Family::RoundedLong, TrialKind::Normal, 15_000.0, 0.5, 5);
        let text = frames_csv(&t, None).unwrap_or_default();
        assert!(text.starts_with("time_s,brightness\n"), "no frame column");
        let stamps: Vec<&str> = text
            .lines()
            .skip(1)
            .filter_map(|l| l.split(',').next())
            .collect();
        // Past 1 s, 5 digits print 0.1 ms steps against a 0.067 ms frame period.
        let repeats = stamps.windows(2).filter(|w| w[0] == w[1]).count();
        assert!(repeats > stamps.len() / 10, "{repeats} of {}", stamps.len());
        assert!(t.truth.latch_release_s.is_some_and(|r| r > 1.0));
        // The measure is printed with few digits: at most one decimal.
        let value = text
            .lines()
            .nth(1)
            .and_then(|l| l.split(',').nth(1))
            .unwrap_or("");
        assert!(
            value.split('.').nth(1).is_none_or(|d| d.len() <= 1),
            "{value}"
        );
    }

    #[test]
    fn a_record_started_mid_loading_has_its_true_onset_before_the_first_stamp() {
        for seed in 0..20 {
            let t = trial(Family::MidLoading, TrialKind::Normal, 1000.0, 0.5, seed);
            let first_s = t.frames.as_deref().unwrap_or_default()[0].1;
            let onset = t.truth.loading_onset_s.unwrap_or(f64::NAN);
            assert!(onset < first_s, "seed {seed}: onset {onset}");
            assert_eq!(t.truth.loading_before_record, Some(true));
            // The whole loading time counts, including the part before the record.
            let release = t.truth.latch_release_s.unwrap_or(f64::NAN);
            let loading_ms = t.truth.loading_ms.unwrap_or(f64::NAN);
            assert!(((release - onset) * 1e3 - loading_ms).abs() < 1e-9);
        }
    }

    #[test]
    fn fast_ringing_swings_steeper_than_the_release_on_the_frames() {
        for (seed, fps) in (0..20).zip([500.0, 1000.0, 2000.0, 4000.0].into_iter().cycle()) {
            let t = trial(Family::FastRinging, TrialKind::Normal, fps, 0.0, seed);
            let (release, peak) = (
                t.truth.latch_release_s.unwrap_or(0.0),
                t.truth.motion_peak_s.unwrap_or(0.0),
            );
            let steepest = |v: Vec<f64>| v.iter().fold(0.0f64, |m, s| m.max(s.abs()));
            let release_step = steepest(steps(&t, release, peak));
            let ring_step = steepest(steps(&t, peak, peak + 0.1));
            assert!(ring_step > release_step, "seed {seed} at {fps} fps");
            assert!(t.truth.ring_slope_ratio.is_some_and(|r| r > 1.0));
            // Half-period shorter than the release.
            let f = t.truth.oscillation.as_ref().map_or(0.0, |o| o.frequency_hz);
            assert!(0.5 / f < peak - release, "seed {seed}");
        }
    }

    #[test]
    fn every_release_shape_rises_to_its_first_extremum_at_the_true_peak() {
        let mut seen = std::collections::BTreeSet::new();
        for seed in 0..60 {
            let t = trial(Family::Shapes, TrialKind::Normal, 2000.0, 0.0, seed);
            if let Some(shape) = t.truth.release_shape {
                seen.insert(format!("{shape:?}"));
            }
            let (release, peak) = (
                t.truth.latch_release_s.unwrap_or(0.0),
                t.truth.motion_peak_s.unwrap_or(0.0),
            );
            let frames = t.frames.as_deref().unwrap_or_default();
            let sign = (frames[frames.len() - 1].2 - frames[0].2).signum();
            let rising = steps(&t, release, peak);
            assert!(rising.iter().all(|s| s * sign >= -1e-9), "seed {seed}");
            // One frame past the peak the measure has turned back (or stays).
            let after = steps(&t, peak, peak + 2.0 / 2000.0);
            assert!(after.iter().all(|s| s * sign <= 1e-9), "seed {seed}");
        }
        assert_eq!(seen.len(), 5, "{seen:?}");
    }

    #[test]
    fn a_heavily_damped_trial_overshoots_by_half_to_two_percent() {
        for seed in 0..10 {
            let t = trial(Family::Damped, TrialKind::Normal, 2000.0, 0.0, seed);
            let frames = t.frames.as_deref().unwrap_or_default();
            let release = t.truth.latch_release_s.unwrap_or(0.0);
            let start = frames.iter().rfind(|f| f.1 < release).map_or(0.0, |f| f.2);
            let end = frames[frames.len() - 1].2;
            let jump = end - start;
            let beyond = frames
                .iter()
                .map(|f| (f.2 - end) * jump.signum())
                .fold(0.0f64, f64::max);
            let share = beyond / jump.abs();
            assert!((0.004..0.021).contains(&share), "seed {seed}: {share}");
            assert!(t.truth.oscillation.is_none() && t.truth.overshoot == Some(true));
        }
    }

    #[test]
    fn small_jumps_are_ten_to_twenty_noise_sd_and_their_drifts_under_three() {
        for seed in 0..20 {
            let t = trial(Family::SmallJump, TrialKind::Normal, 1000.0, 0.5, seed);
            assert!(t.drift_sigma.is_some_and(|d| (0.3..3.0).contains(&d)));
            let noise_free = trial(Family::SmallJump, TrialKind::Normal, 1000.0, 0.0, seed);
            let frames = noise_free.frames.as_deref().unwrap_or_default();
            let peak = noise_free.truth.motion_peak_s.unwrap_or(0.0);
            let release = noise_free.truth.latch_release_s.unwrap_or(0.0);
            let at = |s: f64| frames.iter().rfind(|f| f.1 <= s).map_or(0.0, |f| f.2);
            // Noise 0 draws the sizes against 0.5, as with noise 0.5.
            let jump_sd = (at(peak) - at(release)).abs() / 0.5;
            assert!((8.0..21.0).contains(&jump_sd), "seed {seed}: {jump_sd}");
        }
    }

    #[test]
    fn creep_starts_ten_to_sixty_ms_before_the_snap() {
        for seed in 0..10 {
            let t = trial(Family::Creep, TrialKind::Normal, 1000.0, 0.5, seed);
            let release = t.truth.latch_release_s.unwrap_or(0.0);
            let creep_ms = (release - t.truth.creep_onset_s.unwrap_or(0.0)) * 1e3;
            assert!((10.0..60.0).contains(&creep_ms), "seed {seed}: {creep_ms}");
        }
    }

    #[test]
    fn ramped_drives_load_for_hundreds_of_ms() {
        for seed in 0..10 {
            let t = trial(Family::RampedDrive, TrialKind::Normal, 1000.0, 0.5, seed);
            let loading_ms = t.truth.loading_ms.unwrap_or(0.0);
            assert!((200.0..1000.0).contains(&loading_ms), "{loading_ms}");
            assert_eq!(t.truth.loading_before_record, Some(false));
        }
    }

    #[test]
    fn ringing_clicks_ring_for_ms_and_second_clicks_land_inside_louder_or_far() {
        let mut gaps_ms = Vec::new();
        for seed in 0..30 {
            let t = trial(
                Family::RingingClicks,
                TrialKind::DoubleClick,
                1000.0,
                0.5,
                seed,
            );
            assert!(t.truth.click_decay_ms.is_some_and(|d| d >= 1.0));
            let clicks = t.truth.clicks_s.clone().unwrap_or_default();
            assert_eq!(clicks.len(), 2);
            gaps_ms.push((clicks[1] - clicks[0]) * 1e3);
            // The release click is the earliest, louder or not.
            assert_eq!(t.truth.click_onset_s, Some(clicks[0]));
        }
        assert!(gaps_ms.iter().any(|g| *g < 6.0), "inside the ringing");
        assert!(gaps_ms.iter().any(|g| *g >= 30.0), "tens of ms away");
    }

    #[test]
    fn a_trial_that_never_fires_keeps_its_latch_set_tick_and_no_click() {
        let mut ticked = 0;
        for seed in 0..10 {
            let t = trial(Family::LatchTicks, TrialKind::Failed, 1000.0, 0.5, seed);
            assert!(t.truth.flags.contains(&Flag::NoClick));
            assert_eq!(t.truth.clicks_s.as_deref(), Some(&[][..]));
            if let (Some(ticks), Some(onset)) = (&t.truth.ticks_s, t.truth.loading_onset_s) {
                ticked += 1;
                // Heard before the loading starts, as the clock relation maps it.
                assert!(ticks[0] < onset + 0.002 + 0.3 / 343.0);
            }
        }
        assert!(ticked >= 8, "{ticked} of 10");
    }
}
