//! Splitting a stretch of sound that stays above the trigger level into transients: a ringing
//! click keeps its short-term energy up for milliseconds, and a second click can arrive inside
//! that ringing. Each transient is modelled as a rise followed by a decaying tail; a new
//! transient starts where the energy stands clearly above the tail of the previous one,
//! extrapolated from the stretch of tail just before it.
//!
//! The tail of a transient at a sample is the largest energy of the few windows before the
//! window ending there, each decayed to it at half the rate the tail has shown (the rate from
//! the mean energies of two halves of the recent tail, not their logarithms, so that the
//! troughs of beating resonances do not pull it down). Half the rate, because a sum of
//! decaying resonances decays ever more slowly (its logarithm is convex) and a slow one may
//! still be hidden under a fast one; the largest of several windows, because beating
//! resonances dip and rise again. The new transient's energy must stand a margin above that
//! tail, and its excess must reach the trigger level as it would over the noise.

/// One transient within a span, on the clock of the band signal (window-relative indices).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Piece {
    /// Start of the first energy window that crossed.
    pub first: usize,
    /// Last sample of the transient (the sample before the next transient's first window).
    pub last: usize,
    /// Index of the largest trailing energy.
    pub peak: usize,
    /// Largest trailing energy.
    pub top_energy: f64,
    /// The previous transient's tail (noise mean included) extrapolated to `peak`; `None` for
    /// a transient that starts from the noise floor.
    pub tail_energy: Option<f64>,
    /// Decay rate of the energy above the noise mean after the peak, per sample of the band
    /// signal; `None` where the transient is too short to fit one.
    pub decay_per_sample: Option<f64>,
}

/// How many energy windows of tail, at most, set the extrapolation. Four windows (2 ms at the
/// default 0.5 ms) follow the slowest resonance still ringing yet average over beats of
/// resonances 500 Hz or more apart.
const TAIL_FIT_WINDOWS: usize = 4;

/// Settings of [`split_span`].
#[derive(Debug, Clone, Copy)]
pub struct SplitLevels {
    /// Energy window length, samples of the band signal.
    pub window: usize,
    /// Mean energy of one window of noise alone.
    pub noise_energy: f64,
    /// Factor by which the energy must exceed the extrapolated tail.
    pub margin: f64,
}

/// Splits the span of crossing windows starting at `first` and ending at sample `last` into
/// transients. `energy[i]` is the trailing energy of the window ending at sample `i`;
/// `level_at(start)` is the trigger energy of the search covering a window starting at
/// `start`: the new energy above the tail must also reach it, as it would above the noise.
pub fn split_span(
    energy: &[f64],
    first: usize,
    last: usize,
    levels: SplitLevels,
    level_at: impl Fn(usize) -> f64,
) -> Vec<Piece> {
    let b = levels.window;
    let prefix = prefix_sums(energy, first, last);
    let blocks = BlockMax::new(energy, first, last);
    let mean =
        |a: usize, c: usize| (prefix[c + 1 - first] - prefix[a - first]) / (c + 1 - a) as f64;
    let mut pieces = Vec::new();
    let mut current = open_piece(energy, first, b, None);
    let mut i = current.peak + 1;
    while i <= last {
        if i <= current.peak + b {
            if energy[i] > current.top_energy {
                current.peak = i;
                current.top_energy = energy[i];
            }
            i += 1;
            continue;
        }
        let tail = extrapolate(&current, i, b, levels.noise_energy, energy, &blocks, &mean);
        let excess = energy[i] - tail;
        if energy[i] > levels.margin * tail && excess > level_at(i + 1 - b) - levels.noise_energy {
            current.last = i - b;
            current.decay_per_sample = decay_rate(&current, b, levels.noise_energy, &mean);
            pieces.push(current);
            current = open_piece(energy, i + 1 - b, b, Some(tail));
            current.peak = i;
            current.top_energy = energy[i];
        }
        i += 1;
    }
    current.last = last;
    current.decay_per_sample = decay_rate(&current, b, levels.noise_energy, &mean);
    pieces.push(current);
    pieces
}

/// Joins each transient that starts within `merge` samples of the next and stays under
/// `weak_energy` to that next one. A noise crossing just before a click is split off as a
/// transient of its own when the click stands above it; under the whole-recording level it
/// is more likely noise than a click of its own, and the onset pick of the joined transient
/// finds where the click starts.
pub fn absorb_weak_leads(pieces: Vec<Piece>, merge: usize, weak_energy: f64) -> Vec<Piece> {
    let mut out: Vec<Piece> = Vec::with_capacity(pieces.len());
    let mut lead: Option<Piece> = None;
    for mut piece in pieces {
        if let Some(l) = lead.take() {
            piece.first = l.first;
            piece.tail_energy = l.tail_energy;
        }
        let weak = piece.top_energy <= weak_energy;
        if weak && piece.tail_energy.is_none() && piece.last < piece.first + merge {
            lead = Some(piece);
        } else {
            out.push(piece);
        }
    }
    out.extend(lead);
    out
}

fn open_piece(energy: &[f64], first: usize, b: usize, tail_energy: Option<f64>) -> Piece {
    let peak = (first + b - 1).min(energy.len().saturating_sub(1));
    Piece {
        first,
        last: peak,
        peak,
        top_energy: energy.get(peak).copied().unwrap_or(0.0),
        tail_energy,
        decay_per_sample: None,
    }
}

/// Running sums of `energy[first..=last]`, from 0.
fn prefix_sums(energy: &[f64], first: usize, last: usize) -> Vec<f64> {
    let mut prefix = Vec::with_capacity(last + 2 - first);
    let mut s = 0.0;
    prefix.push(0.0);
    for e in &energy[first..=last] {
        s += e;
        prefix.push(s);
    }
    prefix
}

/// The tail of `piece` (noise mean included) at sample `i`: the largest of the energies of
/// the last [`TAIL_FIT_WINDOWS`] windows that end at least one window before `i` (so that
/// they do not overlap the window ending at `i`), each decayed to `i` at half the rate the
/// tail has shown. Half the rate, because a sum of resonances decays ever more slowly and
/// the slow one may still be hidden under the fast; the largest of several windows, because
/// beating resonances dip and rise again.
fn extrapolate(
    piece: &Piece,
    i: usize,
    b: usize,
    noise_energy: f64,
    energy: &[f64],
    blocks: &BlockMax,
    mean: &impl Fn(usize, usize) -> f64,
) -> f64 {
    let end = i - b;
    let start = piece.peak.max(end.saturating_sub(TAIL_FIT_WINDOWS * b));
    let rate = 0.5 * recent_rate(piece, start, end, noise_energy, mean);
    // The decay factor is at most 1 (the rate is never negative), so a window whose energy
    // above the noise is no more than the largest decayed energy so far cannot raise it: its
    // exponential is skipped, and so is a whole block whose largest energy cannot. Oldest
    // first: in a decaying tail the oldest windows hold the most energy, and the newer ones
    // then rarely pass. The same maximum as over every window, to the bit: a rounded product
    // a x f with f <= 1 never exceeds a, and subtracting the noise keeps order. Likewise a
    // window (or block) whose energy times the largest factor of its block cannot pass is
    // skipped: see [`factor_bound`].
    let mut above = 0.0f64;
    let mut s = start;
    while s <= end {
        let block_end = ((s / TAIL_BLOCK + 1) * TAIL_BLOCK).min(end + 1);
        let block_excess = (blocks.at(s) - noise_energy).max(0.0);
        if block_excess > above {
            let bound = factor_bound(rate, i - (block_end - 1));
            if block_excess * bound > above {
                for (w, &e) in energy.iter().enumerate().take(block_end).skip(s) {
                    let excess = (e - noise_energy).max(0.0);
                    if excess > above && excess * bound > above {
                        above = above.max(excess * (-rate * (i - w) as f64).exp());
                    }
                }
            }
        }
        s = block_end;
    }
    noise_energy + above
}

/// An upper bound on the decay factor exp(-rate d) of every window at least `nearest` samples
/// before the sample it is decayed to (`rate` >= 0, so the nearest window decays least), with
/// a margin of 1e-9 for the rounding of both exponentials (each within a few ulps, 2.2e-16
/// apiece). A product `a x bound` (a >= 0) at or under the running maximum thus proves that
/// the rounded `a x exp(-rate d)` cannot exceed it, so skipping its exponential leaves the
/// maximum the same to the bit.
fn factor_bound(rate: f64, nearest: usize) -> f64 {
    (-rate * nearest as f64).exp() * (1.0 + 1e-9)
}

/// Samples per block of [`BlockMax`].
const TAIL_BLOCK: usize = 16;

/// The largest energy of each block of [`TAIL_BLOCK`] samples (aligned on multiples of it)
/// over a span, so that the tail's search passes over blocks that cannot raise its maximum.
pub struct BlockMax {
    /// Index of the first block.
    first_block: usize,
    max: Vec<f64>,
}

impl BlockMax {
    fn new(energy: &[f64], first: usize, last: usize) -> BlockMax {
        let first_block = first / TAIL_BLOCK;
        let max = (first_block..=last / TAIL_BLOCK)
            .map(|k| {
                let lo = (k * TAIL_BLOCK).max(first);
                let hi = ((k + 1) * TAIL_BLOCK).min(last + 1);
                energy[lo..hi]
                    .iter()
                    .fold(f64::NEG_INFINITY, |m, &e| m.max(e))
            })
            .collect();
        BlockMax { first_block, max }
    }

    /// The largest energy of the block holding sample `s` (within the span).
    fn at(&self, s: usize) -> f64 {
        self.max[s / TAIL_BLOCK - self.first_block]
    }
}

/// Decay rate of the energy above the noise mean over `start..=end`, from the mean energies
/// of its two halves (means, not logarithms, so that the troughs of beating resonances do
/// not weigh more than the crests), never faster than the average decay from the peak; 0
/// over fewer than four samples.
fn recent_rate(
    piece: &Piece,
    start: usize,
    end: usize,
    noise_energy: f64,
    mean: &impl Fn(usize, usize) -> f64,
) -> f64 {
    let half = (end - start) / 2;
    if half < 2 {
        return 0.0;
    }
    let m1 = (mean(start, start + half - 1) - noise_energy).max(0.0);
    let m2 = (mean(end + 1 - half, end) - noise_energy).max(f64::MIN_POSITIVE);
    let c2 = end as f64 - 0.5 * (half - 1) as f64;
    let from_peak =
        ((piece.top_energy - noise_energy).max(m2) / m2).ln() / (c2 - piece.peak as f64);
    let recent = (m1.max(m2) / m2).ln() / half as f64;
    recent.min(from_peak).max(0.0)
}

/// Decay rate of the energy above the noise mean from the peak of `piece` to its end, from the
/// mean energies of the two halves of that stretch; `None` under four windows.
fn decay_rate(
    piece: &Piece,
    b: usize,
    noise_energy: f64,
    mean: &impl Fn(usize, usize) -> f64,
) -> Option<f64> {
    let len = piece.last.checked_sub(piece.peak)?;
    if len < 4 * b {
        return None;
    }
    let half = len / 2;
    let m1 = mean(piece.peak, piece.peak + half - 1) - noise_energy;
    let m2 = mean(piece.peak + half, piece.peak + 2 * half - 1) - noise_energy;
    (m1 > 0.0 && m2 > 0.0 && m1 > m2).then(|| (m1 / m2).ln() / half as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn pruned_extrapolation_equals_the_maximum_over_every_window_to_the_bit() {
        // Slow reference: the decayed energy of every window, then their maximum.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        for trial in 0..200 {
            let n = 400;
            let noise = 1.0;
            let energy: Vec<f64> = (0..n)
                .map(|k| noise * rng.gen::<f64>() * 2.0 + 50.0 * (-(k as f64) / 60.0).exp())
                .collect();
            let prefix = prefix_sums(&energy, 0, n - 1);
            let mean = |a: usize, c: usize| (prefix[c + 1] - prefix[a]) / (c + 1 - a) as f64;
            let b = 1 + trial % 12;
            let piece = open_piece(&energy, 0, b, None);
            let blocks = BlockMax::new(&energy, 0, n - 1);
            for i in (piece.peak + b + 1..n).step_by(7) {
                let end = i - b;
                let start = piece.peak.max(end.saturating_sub(TAIL_FIT_WINDOWS * b));
                let rate = 0.5 * recent_rate(&piece, start, end, noise, &mean);
                let want = noise
                    + (start..=end)
                        .map(|s| (energy[s] - noise).max(0.0) * (-rate * (i - s) as f64).exp())
                        .fold(0.0f64, f64::max);
                let got = extrapolate(&piece, i, b, noise, &energy, &blocks, &mean);
                assert_eq!(got.to_bits(), want.to_bits(), "trial {trial}, i {i}");
            }
        }
    }

    /// Trailing energies (window `b`) of the squared envelope `env`.
    fn trailing(env: &[f64], b: usize) -> Vec<f64> {
        let mut run = 0.0;
        env.iter()
            .enumerate()
            .map(|(i, v)| {
                run += v;
                if i >= b {
                    run -= env[i - b];
                }
                run
            })
            .collect()
    }

    /// Splits the span that starts with the window starting at sample 100.
    fn split(power: &[f64], b: usize) -> Vec<Piece> {
        let energy = trailing(power, b);
        let levels = SplitLevels {
            window: b,
            noise_energy: b as f64,
            margin: 4.0,
        };
        split_span(&energy, 100, energy.len() - 1, levels, |_| 3.0 * b as f64)
    }

    #[test]
    fn a_pure_exponential_tail_stays_one_transient() {
        // Unit noise power, then a decaying power of 1e4 (40 dB) with a 100-sample time
        // constant; exact energies, so any split is the model's own error.
        let b = 24;
        let power: Vec<f64> = (0..2000)
            .map(|i| {
                1.0 + if i >= 100 {
                    1e4 * (-((i - 100) as f64) / 100.0).exp()
                } else {
                    0.0
                }
            })
            .collect();
        let pieces = split(&power, b);
        assert_eq!(pieces.len(), 1, "{pieces:?}");
        // Energy time constant 100 samples: rate 0.01 per sample, to 5 % (the fit's windows
        // sum a little noise).
        let rate = pieces[0].decay_per_sample.unwrap();
        assert!((rate - 0.01).abs() < 5e-4, "{rate}");
    }

    #[test]
    fn a_second_rise_above_the_tail_starts_a_new_transient() {
        // A second decay, half the first's peak, 300 samples on: the tail has fallen to e^-3
        // (0.05) of its peak there, and the held tail (the window 96 samples back, decayed at
        // half the rate) is 0.08 of it, so the second stands 8 dB above the held tail.
        let b = 24;
        let ring = |i: usize, at: usize, a: f64| {
            if i >= at {
                a * (-((i - at) as f64) / 100.0).exp()
            } else {
                0.0
            }
        };
        let power: Vec<f64> = (0..2000)
            .map(|i| 1.0 + ring(i, 100, 1e4) + ring(i, 400, 5e3))
            .collect();
        let pieces = split(&power, b);
        assert_eq!(pieces.len(), 2, "{pieces:?}");
        // The window that crossed starts within one window of the second onset.
        assert!((376..=400).contains(&pieces[1].first), "{pieces:?}");
        assert!(pieces[1].tail_energy.is_some());
    }
}
