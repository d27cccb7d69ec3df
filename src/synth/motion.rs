//! The noise-free motion measure of one synthetic trial: held level, loading drift (a power law
//! or a drive whose speed ramps up smoothly, then runs at constant speed), optional creep, the
//! fast phase in one of several shapes, and what follows its first extremum (rest, a damped
//! ringing of its own frequency, or bounces on a hard stop).

use std::f64::consts::PI;

use serde::{Deserialize, Serialize};

/// How the loading drift grows from its onset to the release.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Drive {
    /// drift * u^bend, u the share of the loading time gone (1: a straight line).
    Power { bend: f64 },
    /// Speed rising smoothly (smoothstep) over `ramp_s`, then constant.
    Ramp { ramp_s: f64 },
}

/// A latch that moves slowly before it snaps, over `span_s` before the release.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Creep {
    None,
    /// Constant speed (the original synthesiser's creep).
    Linear {
        span_s: f64,
        amount: f64,
    },
    /// Speed rising smoothly from zero: amount * x^3.
    Cubic {
        span_s: f64,
        amount: f64,
    },
}

/// Shape of the fast phase from the release to its first extremum.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ReleaseShape {
    /// 0.5 (1 - cos pi u): an undamped spring let go from rest, up to its first extremum.
    OneMinusCos,
    /// 3u^2 - 2u^3.
    Smoothstep,
    /// 0.5 (1 - cos pi u^g), g < 1: the speed peaks early.
    FastStart,
    /// The same with g > 1: the speed peaks late.
    SlowStart,
    /// A damped spring let go from rest; its ringing is the same motion, at its own frequency.
    SpringFromRest,
    /// Cut short by a hard stop while still moving: (1 - cos(theta u)) / (1 - cos theta).
    HardStop,
}

/// The fast phase's shape with its parameters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Shape {
    OneMinusCos,
    Smoothstep,
    Skewed {
        gamma: f64,
    },
    /// Decay rate `sigma` (1/s) and damped angular frequency `wd` (rad/s).
    Spring {
        sigma: f64,
        wd: f64,
    },
    Stop {
        theta: f64,
    },
}

impl Shape {
    pub(crate) fn name(self) -> ReleaseShape {
        match self {
            Shape::OneMinusCos => ReleaseShape::OneMinusCos,
            Shape::Smoothstep => ReleaseShape::Smoothstep,
            Shape::Skewed { gamma } if gamma < 1.0 => ReleaseShape::FastStart,
            Shape::Skewed { .. } => ReleaseShape::SlowStart,
            Shape::Spring { .. } => ReleaseShape::SpringFromRest,
            Shape::Stop { .. } => ReleaseShape::HardStop,
        }
    }

    /// Share of the jump reached at `u` (0 at the release, 1 at the first extremum).
    fn share(self, u: f64) -> f64 {
        match self {
            Shape::OneMinusCos => 0.5 * (1.0 - (PI * u).cos()),
            Shape::Smoothstep => u * u * (3.0 - 2.0 * u),
            Shape::Skewed { gamma } => 0.5 * (1.0 - (PI * u.powf(gamma)).cos()),
            Shape::Spring { sigma, wd } => {
                let tau = u * PI / wd;
                let overshoot = (-sigma * PI / wd).exp();
                spring_from_rest(sigma, wd, tau) / (1.0 + overshoot)
            }
            Shape::Stop { theta } => (1.0 - (theta * u).cos()) / (1.0 - theta.cos()),
        }
    }
}

/// 1 - e^{-s t}(cos wd t + s/wd sin wd t): a damped spring let go from rest, unit travel.
fn spring_from_rest(sigma: f64, wd: f64, tau: f64) -> f64 {
    1.0 - (-sigma * tau).exp() * ((wd * tau).cos() + sigma / wd * (wd * tau).sin())
}

/// What follows the first extremum.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum After {
    /// Comes to rest at the extremum (overdamped).
    Rest,
    /// The original free response from rest at the extremum: swing `amp` (signed like the
    /// jump), decay rate `s`, damped angular frequency `wd`.
    Ring { amp: f64, s: f64, wd: f64 },
    /// Continues the spring of [`Shape::Spring`].
    Spring,
    /// Ballistic bounces off the stop: the first `height` (signed like the jump) lasting
    /// `first_s`, each next one `restitution^2` as high and `restitution` as long.
    Bounces {
        height: f64,
        first_s: f64,
        restitution: f64,
        count: u32,
    },
}

/// The whole noise-free trace.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Motion {
    pub baseline: f64,
    pub loads: bool,
    pub fires: bool,
    pub loading_onset_s: f64,
    pub release_s: f64,
    /// First extremum of the fast phase.
    pub peak_s: f64,
    /// Loading drift at the release (signed; the jump's sign is the fast phase's).
    pub drift: f64,
    pub drive: Drive,
    /// Relaxation time of a trial that loads and never fires.
    pub relax_tau_s: f64,
    pub creep: Creep,
    pub shape: Shape,
    /// Fast-phase travel to its first extremum (signed).
    pub jump: f64,
    pub after: After,
}

impl Motion {
    /// The measure at video time `t`, noise-free.
    pub(crate) fn value_at(&self, t: f64) -> f64 {
        if !self.loads || t < self.loading_onset_s {
            self.baseline
        } else if t < self.release_s {
            self.baseline + self.loading_at(t) + self.creep_at(t)
        } else if !self.fires {
            self.baseline + self.drift * (-(t - self.release_s) / self.relax_tau_s).exp()
        } else {
            self.fired_at(t)
        }
    }

    /// Start of the creep before the snap, when the latch creeps.
    pub(crate) fn creep_onset_s(&self) -> Option<f64> {
        match self.creep {
            Creep::None => None,
            Creep::Linear { span_s, .. } | Creep::Cubic { span_s, .. } => {
                Some(self.release_s - span_s)
            }
        }
    }

    /// Steepest slope of what follows the first extremum over the steepest slope of the fast
    /// phase, noise-free (None when the motion comes to rest). Above 1 the steepest slope of
    /// the trace is a ringing swing, not the release.
    pub(crate) fn ring_slope_ratio(&self) -> Option<f64> {
        let period_s = match (self.shape, self.after) {
            (_, After::Rest) => return None,
            (_, After::Ring { wd, .. }) | (Shape::Spring { wd, .. }, After::Spring) => {
                2.0 * PI / wd
            }
            (_, After::Bounces { first_s, .. }) => 2.0 * first_s,
            (_, After::Spring) => return None,
        };
        let span_s = self.peak_s - self.release_s;
        let step_s = span_s.min(period_s) / 200.0;
        let steepest = |from_s: f64, to_s: f64| {
            let n = ((to_s - from_s) / step_s).ceil() as usize;
            (0..n).fold(0.0f64, |m, k| {
                let t = from_s + k as f64 * step_s;
                m.max((self.value_at(t + step_s) - self.value_at(t)).abs() / step_s)
            })
        };
        let release_slope = steepest(self.release_s, self.peak_s);
        let ring_end_s = self.peak_s + (2.0 * span_s).max(period_s).min(0.2);
        Some(steepest(self.peak_s, ring_end_s) / release_slope)
    }

    fn y_release(&self) -> f64 {
        let creep = match self.creep {
            Creep::None => 0.0,
            Creep::Linear { amount, .. } | Creep::Cubic { amount, .. } => amount,
        };
        self.baseline + self.drift + creep
    }

    fn loading_at(&self, t: f64) -> f64 {
        let span_s = self.release_s - self.loading_onset_s;
        match self.drive {
            Drive::Power { bend } => {
                let u: f64 = (t - self.loading_onset_s) / span_s;
                self.drift * u.powf(bend)
            }
            Drive::Ramp { ramp_s } => {
                let gone = ramp_travel(t - self.loading_onset_s, ramp_s);
                self.drift * gone / ramp_travel(span_s, ramp_s)
            }
        }
    }

    fn creep_at(&self, t: f64) -> f64 {
        if !self.fires {
            return 0.0;
        }
        match self.creep {
            Creep::None => 0.0,
            Creep::Linear { span_s, amount } if t > self.release_s - span_s => {
                amount * (t - (self.release_s - span_s)) / span_s
            }
            Creep::Cubic { span_s, amount } if t > self.release_s - span_s => {
                amount * ((t - (self.release_s - span_s)) / span_s).powi(3)
            }
            _ => 0.0,
        }
    }

    /// The measure at `t >= release_s` of a trial that fires. The sums keep the original
    /// synthesiser's order of operations, so that its seeds still give the same bytes.
    fn fired_at(&self, t: f64) -> f64 {
        let y_release = self.y_release();
        if let (Shape::Spring { sigma, wd }, After::Spring) = (self.shape, self.after) {
            let overshoot = (-sigma * PI / wd).exp();
            let travel = spring_from_rest(sigma, wd, t - self.release_s);
            return y_release + self.jump * travel / (1.0 + overshoot);
        }
        if t < self.peak_s {
            let span_s = self.peak_s - self.release_s;
            return match self.shape {
                Shape::OneMinusCos => {
                    y_release + 0.5 * self.jump * (1.0 - (PI * (t - self.release_s) / span_s).cos())
                }
                shape => y_release + self.jump * shape.share((t - self.release_s) / span_s),
            };
        }
        match self.after {
            After::Rest | After::Spring => y_release + self.jump,
            After::Ring { amp, s, wd } => {
                let tau = t - self.peak_s;
                y_release + self.jump - amp
                    + amp * (-s * tau).exp() * ((wd * tau).cos() + s / wd * (wd * tau).sin())
            }
            After::Bounces {
                height,
                first_s,
                restitution,
                count,
            } => {
                y_release + self.jump
                    - bounce_at(t - self.peak_s, height, first_s, restitution, count)
            }
        }
    }
}

/// Distance from the stop `tau` after the first impact.
fn bounce_at(mut tau: f64, mut height: f64, mut span_s: f64, restitution: f64, count: u32) -> f64 {
    for _ in 0..count {
        if tau < span_s {
            return height * (PI * tau / span_s).sin();
        }
        tau -= span_s;
        height *= restitution * restitution;
        span_s *= restitution;
    }
    0.0
}

/// Distance covered `tau` after the start by a drive whose speed rises as a smoothstep over
/// `ramp_s` to 1, then stays: the integral of 3x^2 - 2x^3 is x^3 - x^4/2.
fn ramp_travel(tau: f64, ramp_s: f64) -> f64 {
    if tau <= 0.0 {
        0.0
    } else if tau < ramp_s {
        let x = tau / ramp_s;
        ramp_s * (x * x * x - 0.5 * x * x * x * x)
    } else {
        0.5 * ramp_s + (tau - ramp_s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_shape_runs_from_zero_to_one_and_stops_at_one() {
        let shapes = [
            Shape::OneMinusCos,
            Shape::Smoothstep,
            Shape::Skewed { gamma: 0.6 },
            Shape::Skewed { gamma: 2.0 },
            Shape::Spring {
                sigma: 200.0,
                wd: 600.0,
            },
            Shape::Stop { theta: 2.0 },
        ];
        for shape in shapes {
            assert!(shape.share(0.0).abs() < 1e-12, "{shape:?}");
            assert!((shape.share(1.0) - 1.0).abs() < 1e-12, "{shape:?}");
            // Rising all the way: the first extremum is at u = 1, not before.
            let rising = (1..100)
                .all(|k| shape.share(k as f64 / 100.0) > shape.share((k - 1) as f64 / 100.0));
            assert!(rising, "{shape:?}");
        }
    }

    #[test]
    fn ramped_drive_reaches_constant_speed_after_its_ramp() {
        // Speed 1 after the ramp: equal steps cover equal distances.
        let ramp_s = 0.2;
        let a = ramp_travel(0.3, ramp_s) - ramp_travel(0.25, ramp_s);
        let b = ramp_travel(0.5, ramp_s) - ramp_travel(0.45, ramp_s);
        assert!((a - 0.05).abs() < 1e-12 && (b - 0.05).abs() < 1e-12);
        // Continuous at the end of the ramp, and gentle at its start (cubic).
        assert!((ramp_travel(ramp_s - 1e-9, ramp_s) - 0.5 * ramp_s).abs() < 1e-8);
        assert!(ramp_travel(0.01 * ramp_s, ramp_s) < 1e-6 * ramp_s);
    }
}
