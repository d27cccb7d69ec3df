//! Helpers for per-frame traces that every video detector shares: the printing step of an
//! exported number, a noise estimate that survives fast ringing and few printed digits, and
//! window means from prefix sums.
//!
//! The noise estimate is the median absolute deviation of second differences (which cancel a
//! straight drift) in blocks of frames, taken over the quiet blocks only: a block where the
//! measure rings or jumps reads high, and the quietest quarter of the blocks sets what "quiet"
//! means. A measure printed with few digits repeats the same value from frame to frame, and its
//! second differences can be mostly zero; the estimate is then floored at the printing step over
//! sqrt(12), the standard deviation of rounding to that step (uniform rounding error).

/// Step of the last printed digit of `v`: 1e-4 for 1.2345, 1 for 12. Zero when `v` needs more
/// than 12 decimals (a number written out in full, not rounded for print).
pub fn print_step(v: f64) -> f64 {
    let mut scale = 1.0f64;
    for _ in 0..=12 {
        let x = v * scale;
        // Parsing "1.2345" gives 1.23449999...; allow for that and for the product's rounding.
        let tolerance = 1e-6 + 8.0 * f64::EPSILON * x.abs();
        if (x - x.round()).abs() <= tolerance {
            return 1.0 / scale;
        }
        scale *= 10.0;
    }
    0.0
}

/// Printing step of a column: the finest step any of its values shows (a value that happens to
/// end in zeros shows a coarser one). Zero for numbers written in full.
pub fn column_print_step(values: &[f64]) -> f64 {
    values
        .iter()
        .map(|&v| print_step(v))
        .fold(f64::INFINITY, f64::min)
        .clamp(0.0, 1e300)
}

/// Robust per-frame noise standard deviation of `y`, floored at `step / sqrt(12)` for a measure
/// printed to `step` (see the module notes).
pub fn noise_sigma(y: &[f64], step: f64) -> f64 {
    let floor = step / 12f64.sqrt();
    let n = y.len();
    if n < 4 {
        return floor;
    }
    let block = (n / 8).clamp(8, 64);
    let mut per_block: Vec<f64> = y
        .chunks(block)
        .filter(|c| c.len() >= 4)
        .map(|c| {
            let mut d: Vec<f64> = c
                .windows(3)
                .map(|w| (w[2] - 2.0 * w[1] + w[0]).abs())
                .collect();
            super::MAD_TO_SIGMA * super::median_in_place(&mut d) / 6f64.sqrt()
        })
        .collect();
    if per_block.is_empty() {
        return floor;
    }
    per_block.sort_by(f64::total_cmp);
    let quiet = per_block[(per_block.len() - 1) / 4];
    // Blocks of noise alone scatter by about a quarter around their level; keep those within
    // half again of the quiet quarter's level and take their median.
    let kept: Vec<f64> = per_block
        .iter()
        .copied()
        .filter(|&s| s <= 1.5 * quiet)
        .collect();
    super::median(&kept).max(floor)
}

/// Prefix sums of a trace, for the mean of any run of frames in constant time.
#[derive(Debug, Clone)]
pub struct Prefix {
    sums: Vec<f64>,
}

impl Prefix {
    pub fn new(y: &[f64]) -> Self {
        let mut sums = Vec::with_capacity(y.len() + 1);
        sums.push(0.0);
        let mut acc = 0.0;
        for v in y {
            acc += v;
            sums.push(acc);
        }
        Prefix { sums }
    }

    /// Number of frames.
    pub fn len(&self) -> usize {
        self.sums.len() - 1
    }

    /// True when there are no frames.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Mean of frames `a..b` (clamped to the trace; the frame at `a` alone when empty).
    pub fn mean(&self, a: usize, b: usize) -> f64 {
        let n = self.len();
        let b = b.min(n);
        let a = a.min(b.saturating_sub(1));
        if b <= a {
            return 0.0;
        }
        (self.sums[b] - self.sums[a]) / (b - a) as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};

    #[test]
    fn print_steps_of_typical_exported_numbers() {
        for (v, want) in [
            (1.2345, 1e-4),
            (0.000125, 1e-6),
            (12.0, 1.0),
            (-0.25, 1e-2),
            (1234.5, 0.1),
            (std::f64::consts::PI, 0.0),
        ] {
            let got = print_step(v);
            assert!(
                (got - want).abs() <= 1e-9 * want.max(1e-12),
                "{v}: {got} vs {want}"
            );
        }
        assert_eq!(column_print_step(&[1.5, 2.25, 3.0]), 0.01);
    }

    #[test]
    fn noise_is_found_under_fast_ringing_over_half_the_record() {
        // Noise 0.5 with a 40-unit ring of 4 frames a cycle over the second half: first
        // differences there are some 50 times the noise.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let noise = Normal::new(0.0, 0.5).unwrap();
        let y: Vec<f64> = (0..2000)
            .map(|k| {
                let ring = if k >= 1000 {
                    40.0 * (std::f64::consts::PI * k as f64 / 2.0).sin()
                } else {
                    0.0
                };
                ring + noise.sample(&mut rng)
            })
            .collect();
        let s = noise_sigma(&y, 0.0);
        // 15 quiet blocks of 64 frames: the median of their MADs is within about 10 %.
        assert!((s - 0.5).abs() < 0.06, "{s}");
    }

    #[test]
    fn a_measure_printed_with_few_digits_never_reads_noise_free() {
        // Noise 0.02 printed to 0.1: nearly every second difference is zero.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(6);
        let noise = Normal::new(0.0, 0.02).unwrap();
        let y: Vec<f64> = (0..500)
            .map(|_| ((12.0f64 + noise.sample(&mut rng)) * 10.0).round() / 10.0)
            .collect();
        let step = column_print_step(&y);
        assert_eq!(step, 0.1);
        assert!((noise_sigma(&y, step) - 0.1 / 12f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn prefix_means_match_direct_means() {
        let y = [1.0, 2.0, 4.0, 8.0];
        let p = Prefix::new(&y);
        assert_eq!(p.mean(1, 3), 3.0);
        assert_eq!(p.mean(0, 4), 3.75);
        assert_eq!(p.mean(3, 9), 8.0);
    }
}
