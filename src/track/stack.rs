//! The block stack: each frame reduced to the means of a grid of blocks, then corrected for
//! the lamp's gain and reduced to its first principal component.
//!
//! Gain (flicker) correction: a lamp on mains flickers at twice the mains frequency and scales
//! every pixel it lights by the same factor. Each frame's gain is the median, over blocks that
//! do not move, of the block's mean over that block's median through the video; the blocks
//! that do not move are the lower half by their variability once a first gain (the median over
//! every lit block) is taken out. Every measure is divided by the frame's gain.
//!
//! The first principal component (PCA; power iteration on the blocks' covariance) of the
//! gain-corrected stack is the per-frame score along the direction in which the blocks change
//! most together: when the part moves less than its own size, each block's brightness moves
//! nearly in proportion to the displacement, and the score follows it.

/// Blocks per image side (the grid is at most this many blocks across and down).
pub const GRID: usize = 16;

/// The block layout of one video.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Grid {
    pub width: usize,
    pub height: usize,
    /// Block edge, pixels (the last block of a row or column may be smaller).
    pub block_w: usize,
    pub block_h: usize,
    pub cols: usize,
    pub rows: usize,
}

impl Grid {
    pub fn new(width: usize, height: usize) -> Self {
        let block_w = width.div_ceil(GRID).max(1);
        let block_h = height.div_ceil(GRID).max(1);
        Grid {
            width,
            height,
            block_w,
            block_h,
            cols: width.div_ceil(block_w),
            rows: height.div_ceil(block_h),
        }
    }

    pub fn blocks(&self) -> usize {
        self.cols * self.rows
    }

    /// Larger block edge, pixels.
    pub fn block_px(&self) -> usize {
        self.block_w.max(self.block_h)
    }

    /// Pixel rectangle (x0, y0, x1, y1), exclusive ends, of block `k`.
    pub fn rect(&self, k: usize) -> (usize, usize, usize, usize) {
        let (c, r) = (k % self.cols, k / self.cols);
        let x0 = c * self.block_w;
        let y0 = r * self.block_h;
        (
            x0,
            y0,
            (x0 + self.block_w).min(self.width),
            (y0 + self.block_h).min(self.height),
        )
    }

    /// Block means of one frame, appended to `out`.
    pub fn reduce(&self, luma: &[f32], out: &mut Vec<f32>) {
        let start = out.len();
        out.resize(start + self.blocks(), 0.0);
        let sums = &mut out[start..];
        for (y, row) in luma.chunks_exact(self.width).enumerate() {
            let base = (y / self.block_h) * self.cols;
            for (c, chunk) in row.chunks(self.block_w).enumerate() {
                sums[base + c] += chunk.iter().sum::<f32>();
            }
        }
        for (k, s) in sums.iter_mut().enumerate() {
            let (x0, y0, x1, y1) = self.rect(k);
            *s /= ((x1 - x0) * (y1 - y0)) as f32;
        }
    }
}

/// Median of a slice (sorted in place); 0 for an empty one.
fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// The per-frame gain, each block's median level and which blocks were taken as still.
#[derive(Debug, Clone, PartialEq)]
pub struct Gain {
    pub gain: Vec<f64>,
    pub still: Vec<bool>,
}

/// Estimates each frame's gain from `stack` (frames x `k` block means).
pub fn estimate_gain(stack: &[f32], k: usize) -> Gain {
    let t = stack.len() / k.max(1);
    let mut level = vec![0.0; k];
    let mut column = Vec::with_capacity(t);
    for (b, l) in level.iter_mut().enumerate() {
        column.clear();
        column.extend((0..t).map(|i| f64::from(stack[i * k + b])));
        *l = median(&mut column);
    }
    let mut lit_levels = level.clone();
    let typical = median(&mut lit_levels);
    // Dark blocks carry noise, not the lamp: only blocks lit to a fifth of the typical level.
    let lit: Vec<bool> = level
        .iter()
        .map(|&l| l > 0.2 * typical && l > 0.0)
        .collect();
    let gains_over = |use_block: &[bool]| -> Vec<f64> {
        let mut ratios = Vec::with_capacity(k);
        (0..t)
            .map(|i| {
                ratios.clear();
                ratios.extend(
                    (0..k)
                        .filter(|&b| use_block[b])
                        .map(|b| f64::from(stack[i * k + b]) / level[b]),
                );
                let g = median(&mut ratios);
                if g > 0.0 {
                    g
                } else {
                    1.0
                }
            })
            .collect()
    };
    let first = gains_over(&lit);
    // Variability of each lit block once the first gain is out: median absolute deviation.
    let mut spread = vec![f64::INFINITY; k];
    for b in (0..k).filter(|&b| lit[b]) {
        column.clear();
        column.extend((0..t).map(|i| f64::from(stack[i * k + b]) / (first[i] * level[b])));
        let m = median(&mut column);
        for v in column.iter_mut() {
            *v = (*v - m).abs();
        }
        spread[b] = median(&mut column);
    }
    let mut finite: Vec<f64> = spread.iter().copied().filter(|s| s.is_finite()).collect();
    let cut = median(&mut finite);
    let still: Vec<bool> = (0..k).map(|b| lit[b] && spread[b] <= cut).collect();
    let gain = if still.iter().any(|&s| s) {
        gains_over(&still)
    } else {
        first
    };
    Gain { gain, still }
}

/// Divides each frame's blocks by its gain, in place.
pub fn correct(stack: &mut [f32], k: usize, gain: &[f64]) {
    for (frame, g) in stack.chunks_exact_mut(k.max(1)).zip(gain) {
        for v in frame {
            *v = (f64::from(*v) / g) as f32;
        }
    }
}

/// Temporal standard deviation of each block.
pub fn block_spread(stack: &[f32], k: usize) -> Vec<f64> {
    let t = (stack.len() / k.max(1)).max(1) as f64;
    let mut sum = vec![0.0; k];
    let mut sum2 = vec![0.0; k];
    for frame in stack.chunks_exact(k.max(1)) {
        for (b, &v) in frame.iter().enumerate() {
            sum[b] += f64::from(v);
            sum2[b] += f64::from(v) * f64::from(v);
        }
    }
    (0..k)
        .map(|b| (sum2[b] / t - (sum[b] / t).powi(2)).max(0.0).sqrt())
        .collect()
}

/// First principal component scores of the stack (frames x `k`), oriented so that the
/// largest excursion from the first tenth's median is positive.
pub fn first_component(stack: &[f32], k: usize) -> Vec<f64> {
    let t = stack.len() / k.max(1);
    let mut mean = vec![0.0; k];
    for frame in stack.chunks_exact(k.max(1)) {
        for (m, &v) in mean.iter_mut().zip(frame) {
            *m += f64::from(v);
        }
    }
    for m in mean.iter_mut() {
        *m /= t.max(1) as f64;
    }
    let mut cov = vec![0.0; k * k];
    let mut x = vec![0.0; k];
    for frame in stack.chunks_exact(k.max(1)) {
        for ((xi, &v), m) in x.iter_mut().zip(frame).zip(&mean) {
            *xi = f64::from(v) - m;
        }
        for i in 0..k {
            let xi = x[i];
            let row = &mut cov[i * k..i * k + i + 1];
            for (c, xj) in row.iter_mut().zip(&x[..=i]) {
                *c += xi * xj;
            }
        }
    }
    for i in 0..k {
        for j in 0..i {
            cov[j * k + i] = cov[i * k + j];
        }
    }
    let v = power_iteration(&cov, k);
    let scores: Vec<f64> = stack
        .chunks_exact(k.max(1))
        .map(|frame| {
            frame
                .iter()
                .zip(&mean)
                .zip(&v)
                .map(|((&f, m), w)| (f64::from(f) - m) * w)
                .sum()
        })
        .collect();
    orient(scores)
}

/// Leading eigenvector of a symmetric `k x k` matrix by power iteration.
fn power_iteration(a: &[f64], k: usize) -> Vec<f64> {
    // Start from the diagonal (the blocks' variances) so the start is never orthogonal to a
    // component carrying variance.
    let mut v: Vec<f64> = (0..k).map(|i| a[i * k + i].sqrt() + 1e-12).collect();
    let mut w = vec![0.0; k];
    for _ in 0..500 {
        for (i, wi) in w.iter_mut().enumerate() {
            *wi = a[i * k..(i + 1) * k]
                .iter()
                .zip(&v)
                .map(|(x, y)| x * y)
                .sum();
        }
        let norm = w.iter().map(|x| x * x).sum::<f64>().sqrt();
        if norm == 0.0 {
            break;
        }
        let change: f64 = w.iter().zip(&v).map(|(a, b)| (a / norm - b).abs()).sum();
        for (vi, wi) in v.iter_mut().zip(&w) {
            *vi = wi / norm;
        }
        if change < 1e-12 * k as f64 {
            break;
        }
    }
    let norm = v.iter().map(|x| x * x).sum::<f64>().sqrt().max(1e-300);
    v.iter().map(|x| x / norm).collect()
}

/// Flips a series so that its largest excursion from the first tenth's median is positive.
pub fn orient(mut y: Vec<f64>) -> Vec<f64> {
    let mut head: Vec<f64> = y[..(y.len() / 10).max(1).min(y.len())].to_vec();
    let base = median(&mut head);
    let far = y
        .iter()
        .copied()
        .max_by(|a, b| (a - base).abs().total_cmp(&(b - base).abs()));
    if far.is_some_and(|f| f < base) {
        for v in y.iter_mut() {
            *v = -*v;
        }
    }
    y
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn block_means_match_a_direct_average() {
        let g = Grid::new(5, 3);
        let luma: Vec<f32> = (0..15).map(|i| i as f32).collect();
        let mut out = Vec::new();
        g.reduce(&luma, &mut out);
        // 5 wide at 16 blocks per side: one pixel per block.
        assert_eq!(out, luma);
        let g = Grid::new(40, 40);
        assert_eq!((g.block_w, g.cols, g.blocks()), (3, 14, 14 * 14));
        let luma = vec![2.0f32; 1600];
        let mut out = Vec::new();
        g.reduce(&luma, &mut out);
        assert!(out.iter().all(|&v| (v - 2.0).abs() < 1e-6));
    }

    #[test]
    fn gain_of_a_flickering_still_scene_is_recovered_despite_a_moving_block() {
        let k = 20;
        let t = 200;
        let mut stack = Vec::new();
        let mut truth = Vec::new();
        for i in 0..t {
            let g = 1.0 + 0.1 * (i as f64 * 0.7).sin();
            truth.push(g);
            for b in 0..k {
                let base = 50.0 + 5.0 * b as f64;
                // Block 3 is the moving part: it doubles after frame 100.
                let moving = if b == 3 && i > 100 { 2.0 } else { 1.0 };
                stack.push((g * base * moving) as f32);
            }
        }
        let gain = estimate_gain(&stack, k);
        assert!(!gain.still[3]);
        let ratio0 = gain.gain[0] / truth[0];
        for (g, tr) in gain.gain.iter().zip(&truth) {
            assert!((g / tr / ratio0 - 1.0).abs() < 1e-5, "{g} {tr}");
        }
    }

    #[test]
    fn first_component_follows_a_shared_change() {
        let k = 6;
        let weights = [1.0, -2.0, 0.5, 0.0, 3.0, -1.0];
        let mut stack = Vec::new();
        let mut truth = Vec::new();
        for i in 0..100 {
            let s = (i as f64 * 0.1).sin() * 10.0 + 10.0;
            truth.push(s);
            for w in weights {
                stack.push((100.0 + w * s) as f32);
            }
        }
        let pc = first_component(&stack, k);
        let norm = weights.iter().map(|w| w * w).sum::<f64>().sqrt();
        let mean_t = truth.iter().sum::<f64>() / 100.0;
        let sign = if pc[0] * (truth[0] - mean_t) < 0.0 {
            -1.0
        } else {
            1.0
        };
        for (p, tr) in pc.iter().zip(&truth) {
            assert!((sign * p - (tr - mean_t) * norm).abs() < 1e-3, "{p} {tr}");
        }
    }
}
