//! The phases of a motion trace, read once: held (and loading), the fast phase of the release,
//! then ringing or rest. This module finds where the fast phase lies; [`super::release`] then
//! places each boundary with a local fit of its own.
//!
//! The trace is smoothed by a running mean of w frames, w the smallest power of two at which the
//! largest move within `max_frames` stands clear of what noise alone reaches (three times the
//! extreme of smoothed noise differences over the record). A move is the largest excursion of
//! the smoothed trace from a frame within the next `max_frames` frames. The fast phase is the
//! **first** move, in time, at least half as large as the largest: a ringing swing or a bounce
//! can be steeper and even larger than the release, but it comes after it, and the release is
//! the first fast phase that leaves the held state. The move runs to its first extremum (the
//! smoothed trace turning back by a tenth of the move, or by more than noise reaches), or to the
//! end of its window when it never turns back (an overdamped release).

/// Where the fast phase lies, in frame indices of the trace.
#[derive(Debug, Clone, PartialEq)]
pub struct FastPhase {
    /// +1 when the measure rises during the fast phase, -1 when it falls.
    pub direction: f64,
    /// Running-mean width that made the phase stand out of the noise, frames.
    pub scale: usize,
    /// A frame in the held state before the phase (up to `max_frames` before it).
    pub held_index: usize,
    /// First frame past half of the move.
    pub mid_index: usize,
    /// Frame of the move's first extremum (largest value before the trace turns back), or of
    /// its largest value within the window when it never turns back.
    pub top_index: usize,
    /// True when the trace turns back after `top_index`.
    pub turns: bool,
    /// Size of the move from the held frame to the top, measure units (positive).
    pub size: f64,
    /// Noise standard deviation of the smoothed trace.
    pub smoothed_sigma: f64,
}

/// Share of the largest move the first fast phase must reach.
const FIRST_MOVE_SHARE: f64 = 0.5;

/// Finds the fast phase of `y` (per-frame noise `sigma`), or `None` when no move within
/// `max_frames` stands clear of the noise.
pub fn locate_fast_phase(y: &[f64], sigma: f64, max_frames: usize) -> Option<FastPhase> {
    let n = y.len();
    let reach = max_frames.max(3);
    let prefix = super::trace::Prefix::new(y);
    let sigma = sigma.max(f64::MIN_POSITIVE);
    let chance = (2.0 * ((n * reach) as f64).max(2.0).ln()).sqrt();
    let mut w = 1usize;
    while w <= (n / 16).max(1) && w <= reach.max(2) / 2 {
        let z: Vec<f64> = (0..=n - w).map(|i| prefix.mean(i, i + w)).collect();
        let smoothed_sigma = sigma / (w as f64).sqrt();
        let noise_reach = std::f64::consts::SQRT_2 * smoothed_sigma * chance;
        let moves = Moves::new(&z, reach);
        let largest = moves.largest();
        if largest >= 3.0 * noise_reach {
            return first_move(&z, &moves, largest, w, smoothed_sigma, reach, noise_reach);
        }
        w *= 2;
    }
    None
}

/// Largest rise and fall of `z` from each frame within the next `reach` frames.
struct Moves {
    up: Vec<f64>,
    down: Vec<f64>,
}

impl Moves {
    /// Sliding maximum and minimum over the window after each frame (monotonic queues, one
    /// pass from the end).
    fn new(z: &[f64], reach: usize) -> Self {
        let m = z.len();
        let (mut up, mut down) = (vec![0.0; m], vec![0.0; m]);
        let mut high: std::collections::VecDeque<usize> = Default::default();
        let mut low: std::collections::VecDeque<usize> = Default::default();
        for i in (0..m).rev() {
            // The window of frame i is i+1 ..= i+reach.
            if i + 1 < m {
                let j = i + 1;
                while high.back().is_some_and(|&b| z[b] <= z[j]) {
                    high.pop_back();
                }
                high.push_back(j);
                while low.back().is_some_and(|&b| z[b] >= z[j]) {
                    low.pop_back();
                }
                low.push_back(j);
            }
            while high.front().is_some_and(|&f| f > i + reach) {
                high.pop_front();
            }
            while low.front().is_some_and(|&f| f > i + reach) {
                low.pop_front();
            }
            up[i] = high.front().map_or(0.0, |&f| z[f] - z[i]);
            down[i] = low.front().map_or(0.0, |&f| z[i] - z[f]);
        }
        Moves { up, down }
    }

    fn largest(&self) -> f64 {
        self.up
            .iter()
            .chain(&self.down)
            .fold(0.0f64, |m, &v| m.max(v))
    }
}

/// The first move at least [`FIRST_MOVE_SHARE`] of the largest, followed to its first extremum.
fn first_move(
    z: &[f64],
    moves: &Moves,
    largest: f64,
    w: usize,
    smoothed_sigma: f64,
    reach: usize,
    noise_reach: f64,
) -> Option<FastPhase> {
    let level = FIRST_MOVE_SHARE * largest;
    let m = z.len();
    let held = (0..m).find(|&i| moves.up[i] >= level || moves.down[i] >= level)?;
    let crossing =
        |s: f64| (held + 1..m.min(held + reach + 1)).find(|&j| s * (z[j] - z[held]) >= level);
    let direction = match (crossing(1.0), crossing(-1.0)) {
        (Some(a), Some(b)) => {
            if a <= b {
                1.0
            } else {
                -1.0
            }
        }
        (Some(_), None) => 1.0,
        (None, _) => -1.0,
    };
    let s = direction;
    let start = crossing(s)?;
    // Follow the move to its first extremum: the smoothed trace must turn back by a tenth of the
    // move so far, or by more than noise reaches, whichever is larger.
    let base = z[held];
    let (mut top, mut turns) = (start, false);
    let end = m.min(held + reach + 1);
    for j in start..m {
        if s * (z[j] - z[top]) > 0.0 {
            top = j;
        } else if s * (z[top] - z[j]) > (0.1 * s * (z[top] - base)).max(noise_reach) {
            turns = true;
            break;
        }
        if j >= end && s * (z[j] - z[top]) <= 0.0 && j > top + reach {
            break;
        }
    }
    let size = s * (z[top] - base);
    let mid = (held + 1..=top)
        .find(|&j| s * (z[j] - base) >= 0.5 * size)
        .unwrap_or(start);
    // Running-mean index i covers frames i..i+w: its centre is (w - 1) / 2 frames on.
    let centre = (w - 1) / 2;
    Some(FastPhase {
        direction,
        scale: w,
        held_index: held + centre,
        mid_index: mid + centre,
        top_index: top + centre,
        turns,
        size,
        smoothed_sigma,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};

    /// A 1 - cos release of `jump` over `dur` frames at frame `at`, then a ring of `amp` and
    /// half-period `half` frames about the new level, in noise `sd`.
    fn ringing_release(at: f64, dur: f64, jump: f64, amp: f64, half: f64, sd: f64) -> Vec<f64> {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(9);
        let noise = Normal::new(0.0, sd).unwrap();
        (0..1000)
            .map(|k| {
                let k = k as f64;
                let v = if k < at {
                    0.0
                } else if k < at + dur {
                    0.5 * jump * (1.0 - (std::f64::consts::PI * (k - at) / dur).cos())
                } else {
                    let h = k - at - dur;
                    jump - amp + amp * (std::f64::consts::PI * h / half).cos() * (-h / 200.0).exp()
                };
                v + noise.sample(&mut rng)
            })
            .collect()
    }

    #[test]
    fn the_first_move_is_the_release_when_the_ringing_is_steeper_and_larger() {
        // A 12-frame release of 50, then a ring of 35 (swings of 70) with a 3-frame half-period.
        let y = ringing_release(400.0, 12.0, 50.0, 35.0, 3.0, 0.5);
        let phase = locate_fast_phase(&y, 0.5, 50).unwrap();
        assert_eq!(phase.direction, 1.0);
        assert!(phase.turns);
        assert!((phase.top_index as f64 - 412.0).abs() <= 1.0, "{phase:?}");
        assert!((phase.mid_index as f64 - 406.0).abs() <= 1.0, "{phase:?}");
    }

    #[test]
    fn a_small_jump_of_ten_noise_sd_is_found_by_smoothing() {
        let y = ringing_release(500.0, 10.0, 10.0, 3.0, 20.0, 1.0);
        let phase = locate_fast_phase(&y, 1.0, 50).unwrap();
        assert!(phase.scale > 1);
        assert!((phase.mid_index as f64 - 505.0).abs() <= 3.0, "{phase:?}");
    }

    #[test]
    fn noise_alone_has_no_fast_phase() {
        for seed in 0..20 {
            let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
            let noise = Normal::new(0.0, 1.0).unwrap();
            let y: Vec<f64> = (0..2000).map(|_| noise.sample(&mut rng)).collect();
            assert!(locate_fast_phase(&y, 1.0, 50).is_none(), "seed {seed}");
        }
    }
}
