//! Families of synthetic trials. Each family is a wide distribution of one kind of real-world
//! difficulty (a release shape, ringing faster than the release, a small jump, a ramped drive,
//! a record that starts mid-loading, rounded exports, heavy damping, creep, ringing clicks,
//! latch-set ticks) drawn around the original synthesiser's trial (`classic`). One family, a
//! bounce on a hard stop, is held out: no detector setting may be tuned on it.

use std::f64::consts::PI;

use rand::Rng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::motion::{After, Creep, Drive, Motion, Shape};
use super::{SynthConfig, TrialKind};

/// A family of synthetic trials.
#[derive(
    Debug, Clone, Copy, Default, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize,
)]
#[serde(rename_all = "snake_case")]
pub enum Family {
    /// The original synthesiser: 1 - cos release, ringing slower than the release, loading
    /// drift against the jump; latch creep, overdamped releases and curved drifts when the
    /// config asks for variety.
    #[default]
    Classic,
    /// Release shapes (1 - cos, smoothstep, fast start, slow start, spring from rest), long
    /// releases, ringing frequency drawn apart from the release.
    Shapes,
    /// Ringing whose half-period is shorter than the release and whose swing is steeper.
    FastRinging,
    /// Jumps of 10-20 per-frame noise SD, loading drifts of 0.3-3 SD of either sign.
    SmallJump,
    /// A drive whose speed ramps up smoothly over 0.1-0.6 s, then runs at constant speed.
    RampedDrive,
    /// The record starts while the loading is already under way.
    MidLoading,
    /// Long records exported with 5-significant-digit timestamps, few-digit measures and no
    /// `frame` column.
    RoundedLong,
    /// A heavily damped spring (in water, say) that overshoots by 0.5-2 % of the jump.
    Damped,
    /// A latch that creeps for 10-60 ms with smoothly rising speed before it snaps.
    Creep,
    /// Clicks that ring for several ms; second clicks inside the ringing, louder, or tens of
    /// ms later.
    RingingClicks,
    /// A faint tick when the latch is set, also in trials that never fire.
    LatchTicks,
    /// Held out. The arm hits a hard stop while still moving and bounces off it, each bounce
    /// shorter than the release.
    HardStopBounce,
}

impl Family {
    /// Every family, the held-out one last.
    pub const ALL: [Family; 12] = [
        Family::Classic,
        Family::Shapes,
        Family::FastRinging,
        Family::SmallJump,
        Family::RampedDrive,
        Family::MidLoading,
        Family::RoundedLong,
        Family::Damped,
        Family::Creep,
        Family::RingingClicks,
        Family::LatchTicks,
        Family::HardStopBounce,
    ];

    /// Name used on the command line and in tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Family::Classic => "classic",
            Family::Shapes => "shapes",
            Family::FastRinging => "fast_ringing",
            Family::SmallJump => "small_jump",
            Family::RampedDrive => "ramped_drive",
            Family::MidLoading => "mid_loading",
            Family::RoundedLong => "rounded_long",
            Family::Damped => "damped",
            Family::Creep => "creep",
            Family::RingingClicks => "ringing_clicks",
            Family::LatchTicks => "latch_ticks",
            Family::HardStopBounce => "hard_stop_bounce",
        }
    }

    /// Parses a family name.
    pub fn parse(s: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|f| f.as_str() == s)
    }

    /// Kept out of every tuning loop: reported apart, never used to choose a setting.
    pub fn is_held_out(self) -> bool {
        self == Family::HardStopBounce
    }

    /// True for the original synthesiser, whose seeds give the bytes they always gave.
    pub fn is_classic(&self) -> bool {
        *self == Family::Classic
    }
}

/// How the frames CSV is written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FramesFormat {
    /// Write a `frame` column.
    pub frame_column: bool,
    /// Timestamps printed to this many significant digits (None: 7 decimals).
    pub timestamp_digits: Option<u32>,
    /// Decimals of the motion measure.
    pub value_decimals: usize,
}

impl Default for FramesFormat {
    fn default() -> Self {
        FramesFormat {
            frame_column: true,
            timestamp_digits: None,
            value_decimals: 3,
        }
    }
}

/// What the audio of a trial holds beyond the original click.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub(crate) struct AudioStyle {
    /// Clicks ring for several ms, and second clicks land inside the ringing, louder, or far.
    pub ringing: bool,
    /// A faint tick when the latch is set.
    pub ticks: bool,
}

/// Everything a family decides about one trial.
#[derive(Debug, Clone)]
pub(crate) struct Plan {
    pub n_frames: usize,
    pub motion: Motion,
    pub loading_ms: f64,
    pub release_ms: f64,
    /// Ringing frequency (Hz) and per-cycle amplitude ratio, when two clean cycles show.
    pub ringing: Option<(f64, f64)>,
    pub format: FramesFormat,
    pub audio: AudioStyle,
}

/// The original synthesiser's draws, in its order, so that old seeds give the same trials.
pub(crate) fn classic(rng: &mut ChaCha8Rng, kind: TrialKind, config: &SynthConfig) -> Plan {
    let fps = config.fps;
    let n_frames = (config.duration_s * fps).round().max(16.0) as usize;
    let duration_s = n_frames as f64 / fps;
    // Event times: release in the second half, loading 40-150 ms before it.
    let release_s = duration_s * rng.gen_range(0.5..0.6) + rng.gen_range(0.0..1.0) / fps;
    let loading_ms = rng.gen_range(40.0..150.0f64).min(release_s * 1e3 * 0.8);
    let release_ms = rng.gen_range(2.0..6.0f64).max(4.0e3 / fps);
    let freq_hz = rng.gen_range(40.0..120.0f64).min(fps / 10.0);
    let ratio: f64 = rng.gen_range(0.35..0.8);
    let sign = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
    let baseline = rng.gen_range(80.0..160.0);
    let jump = sign * rng.gen_range(40.0..70.0);
    let drift = -jump * rng.gen_range(0.15..0.3);
    let osc_amp = jump * rng.gen_range(0.25..0.4);
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
    let motion = Motion {
        baseline,
        loads: kind != TrialKind::Empty,
        fires: kind.fires(),
        loading_onset_s: release_s - loading_ms * 1e-3,
        release_s,
        peak_s: release_s + release_ms * 1e-3,
        drift,
        drive: Drive::Power { bend },
        relax_tau_s,
        creep: if creep_s > 0.0 {
            Creep::Linear {
                span_s: creep_s,
                amount: creep,
            }
        } else {
            Creep::None
        },
        shape: Shape::OneMinusCos,
        jump,
        after: if overshoot {
            After::Ring {
                amp: osc_amp,
                s: -ratio.ln() * freq_hz,
                wd: 2.0 * PI * freq_hz,
            }
        } else {
            After::Rest
        },
    };
    Plan {
        n_frames,
        motion,
        loading_ms,
        release_ms,
        ringing: overshoot.then_some((freq_hz, ratio)),
        format: FramesFormat::default(),
        audio: AudioStyle::default(),
    }
}

/// A trial of a family other than `classic`, before its timeline is laid out.
struct Draft {
    /// Held level before the loading onset, s (negative: the record starts mid-loading).
    held_s: f64,
    loading_s: f64,
    /// Record after the release, s.
    after_release_s: f64,
    release_ms: f64,
    baseline: f64,
    jump: f64,
    drift: f64,
    drive: Drive,
    creep: Creep,
    shape: Shape,
    /// Ringing frequency (Hz), per-cycle amplitude ratio and swing as a share of the jump.
    ringing: Option<(f64, f64, f64)>,
    after: Option<After>,
    relax_tau_s: f64,
    format: FramesFormat,
    audio: AudioStyle,
}

/// Draws a trial of `family` (not `classic`).
pub(crate) fn draw(
    family: Family,
    rng: &mut ChaCha8Rng,
    kind: TrialKind,
    config: &SynthConfig,
) -> Plan {
    if family.is_classic() {
        return classic(rng, kind, config);
    }
    let mut d = base(rng, config);
    let noise = noise_scale(config);
    let fps = config.fps;
    match family {
        Family::Classic => {}
        Family::Shapes => shapes(&mut d, rng, fps, noise),
        Family::FastRinging => fast_ringing(&mut d, rng, fps),
        Family::SmallJump => {
            d.jump = d.jump.signum() * noise * rng.gen_range(10.0..20.0);
            d.drift = signed_in(rng, noise * 0.3, noise * 3.0);
        }
        Family::RampedDrive => ramped_drive(&mut d, rng, noise),
        Family::MidLoading => mid_loading(&mut d, rng, fps, noise),
        Family::RoundedLong => rounded_long(&mut d, rng, config),
        Family::Damped => damped(&mut d, rng, fps),
        Family::Creep => {
            d.loading_s = rng.gen_range(0.08..0.2);
            d.creep = Creep::Cubic {
                span_s: rng.gen_range(0.01..0.06),
                amount: d.jump * rng.gen_range(0.02..0.08),
            };
            d.shape = pick_shape(rng, &[Shape::OneMinusCos, Shape::Smoothstep]);
        }
        Family::RingingClicks => d.audio.ringing = true,
        Family::LatchTicks => d.audio.ticks = true,
        Family::HardStopBounce => hard_stop_bounce(&mut d, rng, fps, noise),
    }
    lay_out(d, rng, kind, fps)
}

/// The per-frame noise the family's sizes are measured against (0.5 when noise-free).
pub(crate) fn noise_scale(config: &SynthConfig) -> f64 {
    if config.video_noise > 0.0 {
        config.video_noise
    } else {
        0.5
    }
}

/// A size drawn from `lo..hi`, of either sign.
fn signed_in(rng: &mut ChaCha8Rng, lo: f64, hi: f64) -> f64 {
    let magnitude = rng.gen_range(lo..hi);
    if rng.gen_bool(0.5) {
        magnitude
    } else {
        -magnitude
    }
}

fn pick_shape(rng: &mut ChaCha8Rng, shapes: &[Shape]) -> Shape {
    shapes[rng.gen_range(0..shapes.len())]
}

/// The original trial's ranges, laid out on the config's record length.
fn base(rng: &mut ChaCha8Rng, config: &SynthConfig) -> Draft {
    let fps = config.fps;
    let loading_s = rng.gen_range(0.04..0.15);
    let release_at_s = config.duration_s * rng.gen_range(0.5..0.6);
    let jump = signed_in(rng, 40.0, 70.0);
    Draft {
        held_s: (release_at_s - loading_s).max(20.0 / fps),
        loading_s,
        after_release_s: (config.duration_s - release_at_s).max(40.0 / fps),
        release_ms: rng.gen_range(2.0..6.0f64).max(4.0e3 / fps),
        baseline: rng.gen_range(80.0..160.0),
        jump,
        drift: -jump * rng.gen_range(0.15..0.3),
        drive: Drive::Power {
            bend: rng.gen_range(1.0..1.4),
        },
        creep: Creep::None,
        shape: Shape::OneMinusCos,
        ringing: Some((
            rng.gen_range(40.0..120.0f64).min(fps / 10.0),
            rng.gen_range(0.35..0.8),
            rng.gen_range(0.25..0.4),
        )),
        after: None,
        relax_tau_s: rng.gen_range(0.02..0.05),
        format: FramesFormat::default(),
        audio: AudioStyle::default(),
    }
}

fn shapes(d: &mut Draft, rng: &mut ChaCha8Rng, fps: f64, noise: f64) {
    d.release_ms = if rng.gen_bool(0.3) {
        rng.gen_range(12.0..40.0) * 1e3 / fps
    } else {
        rng.gen_range(2.0..10.0f64).max(4.0e3 / fps)
    };
    d.drift = signed_in(rng, noise * 5.0, noise * 40.0);
    let release_s = d.release_ms * 1e-3;
    d.shape = match rng.gen_range(0..5) {
        0 => Shape::OneMinusCos,
        1 => Shape::Smoothstep,
        2 => Shape::Skewed {
            gamma: rng.gen_range(0.5..0.8),
        },
        3 => Shape::Skewed {
            gamma: rng.gen_range(1.4..2.5),
        },
        _ => {
            let zeta: f64 = rng.gen_range(0.05..0.5);
            let wd = PI / release_s;
            d.after = Some(After::Spring);
            Shape::Spring {
                sigma: zeta / (1.0 - zeta * zeta).sqrt() * wd,
                wd,
            }
        }
    };
    // Ringing frequency times release time, 0.1-2 on a log scale: slower and faster.
    let cycles_per_release = (rng.gen_range(0.1f64.ln()..2.0f64.ln())).exp();
    let lowest_hz = 2.5 / d.after_release_s;
    let freq_hz = (cycles_per_release / release_s)
        .min(fps / 10.0)
        .max(lowest_hz);
    d.ringing = Some((freq_hz, rng.gen_range(0.35..0.8), rng.gen_range(0.25..0.5)));
}

fn fast_ringing(d: &mut Draft, rng: &mut ChaCha8Rng, fps: f64) {
    // Cycles per release time: at 1.25-3 a swing of 0.3-0.6 of the jump is steeper than the
    // release (the swing's slope over the release's peak slope is about 4 k amp / jump).
    let cycles_per_release: f64 = rng.gen_range(1.25..3.0);
    // At least 8 frames per ringing cycle, so the frames show it.
    d.release_ms = rng
        .gen_range(2.0..12.0f64)
        .max(8.0 * cycles_per_release * 1e3 / fps);
    d.shape = pick_shape(rng, &[Shape::OneMinusCos, Shape::Smoothstep]);
    let freq_hz = cycles_per_release / (d.release_ms * 1e-3);
    d.ringing = Some((freq_hz, rng.gen_range(0.4..0.8), rng.gen_range(0.3..0.6)));
}

fn ramped_drive(d: &mut Draft, rng: &mut ChaCha8Rng, noise: f64) {
    d.loading_s = rng.gen_range(0.2..1.0);
    d.held_s = rng.gen_range(0.05..0.3);
    d.after_release_s = rng.gen_range(0.2..0.3);
    d.drive = Drive::Ramp {
        ramp_s: rng.gen_range(0.1..0.6f64).min(d.loading_s),
    };
    d.drift = signed_in(rng, noise * 3.0, noise * 40.0);
}

fn mid_loading(d: &mut Draft, rng: &mut ChaCha8Rng, fps: f64, noise: f64) {
    d.loading_s = rng.gen_range(0.1..0.6);
    d.after_release_s = rng.gen_range(0.15..0.3);
    if rng.gen_bool(0.5) {
        d.drive = Drive::Ramp {
            ramp_s: rng.gen_range(0.05..0.4f64).min(d.loading_s),
        };
    }
    // The record starts 10-80 % of the way into the loading, with at least 16 frames left.
    let gone = rng
        .gen_range(0.1..0.8f64)
        .min(1.0 - 16.0 / (fps * d.loading_s))
        .max(0.05);
    d.held_s = -gone * d.loading_s;
    d.drift = signed_in(rng, noise * 6.0, noise * 40.0);
}

fn rounded_long(d: &mut Draft, rng: &mut ChaCha8Rng, config: &SynthConfig) {
    let most_s = 60_000.0 / config.fps;
    let length_s = rng
        .gen_range(1.5..4.0f64)
        .min(most_s)
        .max(config.duration_s);
    d.loading_s = rng.gen_range(0.04..0.3);
    let release_at_s = length_s * rng.gen_range(0.55..0.85);
    d.held_s = (release_at_s - d.loading_s).max(20.0 / config.fps);
    d.after_release_s = (length_s - release_at_s).max(40.0 / config.fps);
    d.format = FramesFormat {
        frame_column: false,
        timestamp_digits: Some(5),
        value_decimals: rng.gen_range(0..=1),
    };
}

fn damped(d: &mut Draft, rng: &mut ChaCha8Rng, fps: f64) {
    // Overshoot e^{-zeta pi / sqrt(1 - zeta^2)} of 0.5-2 %: zeta 0.78-0.86.
    let overshoot: f64 = rng.gen_range(0.005..0.02);
    let zeta = -overshoot.ln() / (PI * PI + overshoot.ln().powi(2)).sqrt();
    d.release_ms = rng.gen_range(4.0..15.0f64).max(6.0e3 / fps);
    let wd = PI / (d.release_ms * 1e-3);
    d.shape = Shape::Spring {
        sigma: zeta / (1.0 - zeta * zeta).sqrt() * wd,
        wd,
    };
    d.after = Some(After::Spring);
    // No two clean cycles: the second swing is overshoot^2 of the jump.
    d.ringing = None;
}

fn hard_stop_bounce(d: &mut Draft, rng: &mut ChaCha8Rng, fps: f64, noise: f64) {
    d.release_ms = rng.gen_range(2.0..10.0f64).max(4.0e3 / fps);
    d.shape = Shape::Stop {
        theta: PI * rng.gen_range(0.55..0.85),
    };
    d.drift = signed_in(rng, noise * 3.0, noise * 30.0);
    if rng.gen_bool(0.5) {
        d.drive = Drive::Ramp {
            ramp_s: rng.gen_range(0.02..0.1f64).min(d.loading_s),
        };
    }
    let height = d.jump * rng.gen_range(0.15..0.4);
    let restitution: f64 = rng.gen_range(0.4..0.7);
    // Bounces until one is a quarter of the noise high, at most 12.
    let fading = (noise / 4.0 / height.abs()).ln() / (restitution * restitution).ln();
    d.after = Some(After::Bounces {
        height,
        first_s: d.release_ms * 1e-3 * rng.gen_range(0.3..0.8),
        restitution,
        count: fading.ceil().clamp(1.0, 12.0) as u32,
    });
    d.ringing = None;
    if rng.gen_bool(0.5) {
        d.audio.ringing = true;
    } else {
        d.audio.ticks = true;
    }
}

/// Lays the draft out on the frame clock: held level, loading, release (at a random point
/// within a frame), the rest of the record.
fn lay_out(d: Draft, rng: &mut ChaCha8Rng, kind: TrialKind, fps: f64) -> Plan {
    let release_s = d.held_s + d.loading_s + rng.gen_range(0.0..1.0) / fps;
    let n_frames = ((release_s + d.after_release_s) * fps).round().max(16.0) as usize;
    let release_ms = d.release_ms;
    let ringing = match (d.shape, d.ringing) {
        (Shape::Spring { sigma, wd }, Some(_)) => {
            Some((wd / (2.0 * PI), (-2.0 * PI * sigma / wd).exp()))
        }
        (_, r) => r.map(|(f, ratio, _)| (f, ratio)),
    };
    let after = d.after.unwrap_or(match d.ringing {
        Some((f, ratio, share)) => After::Ring {
            amp: d.jump * share,
            s: -ratio.ln() * f,
            wd: 2.0 * PI * f,
        },
        None => After::Rest,
    });
    let motion = Motion {
        baseline: d.baseline,
        loads: kind != TrialKind::Empty,
        fires: kind.fires(),
        loading_onset_s: release_s - d.loading_s,
        release_s,
        peak_s: release_s + release_ms * 1e-3,
        drift: d.drift,
        drive: d.drive,
        relax_tau_s: d.relax_tau_s,
        creep: d.creep,
        shape: d.shape,
        jump: d.jump,
        after,
    };
    Plan {
        n_frames,
        motion,
        loading_ms: d.loading_s * 1e3,
        release_ms,
        ringing,
        format: d.format,
        audio: d.audio,
    }
}
