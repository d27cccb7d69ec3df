//! Point tracking: Shi-Tomasi corners (Shi and Tomasi 1994, "Good features to track": the
//! smaller eigenvalue of the windowed gradient matrix) and pyramidal Lucas-Kanade (Lucas and
//! Kanade 1981, in the coarse-to-fine form of Bouguet 2000), frame to frame.

/// A greyscale image, row-major.
#[derive(Debug, Clone, PartialEq)]
pub struct Plane {
    pub width: usize,
    pub height: usize,
    pub data: Vec<f32>,
}

impl Plane {
    #[inline]
    fn at(&self, x: usize, y: usize) -> f32 {
        self.data[y * self.width + x]
    }

    /// Bilinear sample, the border repeated outside the image (so a window may overhang the
    /// edge of a coarse pyramid level).
    #[inline]
    fn sample(&self, x: f32, y: f32) -> f32 {
        let x = x.clamp(0.0, (self.width - 1) as f32 - 1e-3);
        let y = y.clamp(0.0, (self.height - 1) as f32 - 1e-3);
        let (x0, y0) = (x.floor(), y.floor());
        let (fx, fy) = (x - x0, y - y0);
        let (ix, iy) = (x0 as usize, y0 as usize);
        let i = iy * self.width + ix;
        let d = &self.data;
        let right = if ix + 1 < self.width { 1 } else { 0 };
        let down = if iy + 1 < self.height { self.width } else { 0 };
        let top = d[i] + fx * (d[i + right] - d[i]);
        let bottom = d[i + down] + fx * (d[i + down + right] - d[i + down]);
        top + fy * (bottom - top)
    }

    /// The (2 half + 1)^2 window centred on (cx, cy), bilinearly sampled, into `out`. Every
    /// pixel of the window shares one fractional offset, so the weights are computed once;
    /// windows that overhang the edge take the border-repeating [`Plane::sample`].
    fn window(&self, cx: f32, cy: f32, half: usize, out: &mut Vec<f32>) {
        let side = 2 * half + 1;
        out.clear();
        let (x0, y0) = (cx - half as f32, cy - half as f32);
        let (fx0, fy0) = (x0.floor(), y0.floor());
        let (fx, fy) = (x0 - fx0, y0 - fy0);
        let inside = fx0 >= 0.0
            && fy0 >= 0.0
            && (fx0 as usize + side) < self.width
            && (fy0 as usize + side) < self.height;
        if !inside {
            for dy in 0..side {
                for dx in 0..side {
                    out.push(self.sample(x0 + dx as f32, y0 + dy as f32));
                }
            }
            return;
        }
        let (w00, w10) = ((1.0 - fx) * (1.0 - fy), fx * (1.0 - fy));
        let (w01, w11) = ((1.0 - fx) * fy, fx * fy);
        let (ix, iy) = (fx0 as usize, fy0 as usize);
        let w = self.width;
        for row in 0..side {
            let top = &self.data[(iy + row) * w + ix..(iy + row) * w + ix + side + 1];
            let bottom = &self.data[(iy + row + 1) * w + ix..(iy + row + 1) * w + ix + side + 1];
            for col in 0..side {
                out.push(
                    w00 * top[col] + w10 * top[col + 1] + w01 * bottom[col] + w11 * bottom[col + 1],
                );
            }
        }
    }

    /// Half-size image: smoothed with the binomial kernel [1 4 6 4 1]/16 along each axis
    /// (Burt and Adelson's pyramid; edges repeat) and every other pixel kept, so that detail
    /// finer than the coarser level can hold does not alias into it.
    fn half(&self) -> Plane {
        let (w, h) = (self.width / 2, self.height / 2);
        // Rows first, at every other column.
        let mut rows = Vec::with_capacity(w * self.height);
        for line in self.data.chunks_exact(self.width) {
            rows.extend((0..w).map(|x| binomial(|i| line[tap(2 * x, i, self.width)])));
        }
        let mut data = Vec::with_capacity(w * h);
        for y in 0..h {
            let row = |i: usize| &rows[tap(2 * y, i, self.height) * w..][..w];
            let (r0, r1, r2, r3, r4) = (row(0), row(1), row(2), row(3), row(4));
            data.extend((0..w).map(|x| {
                let at = [r0[x], r1[x], r2[x], r3[x], r4[x]];
                binomial(|i| at[i])
            }));
        }
        Plane {
            width: w,
            height: h,
            data,
        }
    }
}

/// Burt and Adelson's binomial kernel [1 4 6 4 1]/16.
const BINOMIAL: [f32; 5] = [1.0 / 16.0, 4.0 / 16.0, 6.0 / 16.0, 4.0 / 16.0, 1.0 / 16.0];

/// The kernel applied to the five taps `at(0..5)`, summed in tap order from the empty sum of
/// `f32` (the order and start `Iterator::sum` uses, so results do not depend on how the taps
/// are fetched).
#[inline(always)]
fn binomial(at: impl Fn(usize) -> f32) -> f32 {
    let empty: f32 = std::iter::empty::<f32>().sum();
    empty
        + BINOMIAL[0] * at(0)
        + BINOMIAL[1] * at(1)
        + BINOMIAL[2] * at(2)
        + BINOMIAL[3] * at(3)
        + BINOMIAL[4] * at(4)
}

/// Position of tap `i` (0..5) of the kernel centred on `centre`, the edge repeated.
#[inline(always)]
fn tap(centre: usize, i: usize, n: usize) -> usize {
    (centre + i).saturating_sub(2).min(n - 1)
}

/// An image and its coarser levels.
pub struct Pyramid {
    pub levels: Vec<Plane>,
}

impl Pyramid {
    /// Builds up to `levels` levels, stopping while a level is still larger than a window.
    pub fn new(base: Plane, levels: usize, half_window: usize) -> Self {
        let mut out = vec![base];
        while out.len() < levels {
            let Some(last) = out.last() else { break };
            if last.width / 2 < 4 * half_window || last.height / 2 < 4 * half_window {
                break;
            }
            let next = last.half();
            out.push(next);
        }
        Pyramid { levels: out }
    }
}

/// Shi-Tomasi corner strength (smaller eigenvalue of the gradient matrix summed over a
/// (2r+1)^2 window) at each pixel of `mask`; returns up to `max` corners, strongest first,
/// at least `min_distance` pixels apart and at least a fiftieth as strong as the strongest.
pub fn corners(
    img: &Plane,
    r: usize,
    mask: impl Fn(usize, usize) -> bool,
    max: usize,
    min_distance: f32,
) -> Vec<(f32, f32)> {
    let (w, h) = (img.width, img.height);
    let margin = r + 2;
    if w <= 2 * margin || h <= 2 * margin {
        return Vec::new();
    }
    let mut gxx = vec![0.0f32; w * h];
    let mut gyy = vec![0.0f32; w * h];
    let mut gxy = vec![0.0f32; w * h];
    for y in 1..h - 1 {
        for x in 1..w - 1 {
            let gx = 0.5 * (img.at(x + 1, y) - img.at(x - 1, y));
            let gy = 0.5 * (img.at(x, y + 1) - img.at(x, y - 1));
            let i = y * w + x;
            gxx[i] = gx * gx;
            gyy[i] = gy * gy;
            gxy[i] = gx * gy;
        }
    }
    let mut scored = Vec::new();
    for y in margin..h - margin {
        for x in margin..w - margin {
            if !mask(x, y) {
                continue;
            }
            let (mut a, mut b, mut c) = (0.0f32, 0.0f32, 0.0f32);
            for yy in y - r..=y + r {
                let row = yy * w;
                for xx in x - r..=x + r {
                    a += gxx[row + xx];
                    b += gxy[row + xx];
                    c += gyy[row + xx];
                }
            }
            let half_trace = 0.5 * (a + c);
            let min_eig = half_trace - (0.25 * (a - c) * (a - c) + b * b).sqrt();
            scored.push((min_eig, x, y));
        }
    }
    scored.sort_by(|p, q| q.0.total_cmp(&p.0));
    let strongest = scored.first().map_or(0.0, |s| s.0);
    let mut chosen: Vec<(f32, f32)> = Vec::new();
    for (s, x, y) in scored {
        if chosen.len() >= max || s <= strongest / 50.0 || s <= 0.0 {
            break;
        }
        let (x, y) = (x as f32, y as f32);
        let far = chosen
            .iter()
            .all(|c| (c.0 - x).powi(2) + (c.1 - y).powi(2) >= min_distance * min_distance);
        if far {
            chosen.push((x, y));
        }
    }
    chosen
}

/// Lucas-Kanade settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LkConfig {
    /// Half-size of the square window, pixels (7: a 15 x 15 window, common practice).
    pub half_window: usize,
    /// Iterations per level at most.
    pub iterations: usize,
    /// Stop when an update moves the point less than this, pixels.
    pub epsilon_px: f32,
    /// A point is lost when the mean absolute difference between its window in the two
    /// frames, after alignment, exceeds this fraction of the window's own mean absolute
    /// deviation.
    pub max_residual: f32,
}

impl Default for LkConfig {
    fn default() -> Self {
        LkConfig {
            half_window: 7,
            iterations: 30,
            epsilon_px: 0.01,
            max_residual: 0.6,
        }
    }
}

/// Follows the point `p` (full-resolution pixels) from `prev` to `next`; `None` when it is
/// lost (left the image, no texture, or the windows no longer match).
pub fn track(prev: &Pyramid, next: &Pyramid, p: (f32, f32), cfg: &LkConfig) -> Option<(f32, f32)> {
    let r = cfg.half_window;
    let side = 2 * r + 1;
    let n_levels = prev.levels.len().min(next.levels.len());
    let mut guess = (0.0f32, 0.0f32);
    let (mut wide, mut tpl, mut ix, mut iy, mut cur) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for level in (0..n_levels).rev() {
        let scale = (1u32 << level) as f32;
        let (a, b) = (&prev.levels[level], &next.levels[level]);
        let (px, py) = (p.0 / scale, p.1 / scale);
        // Far outside the level, a window holds only repeated border: the point has left.
        let inside = |img: &Plane, x: f32, y: f32| {
            x >= 0.0 && y >= 0.0 && x <= (img.width - 1) as f32 && y <= (img.height - 1) as f32
        };
        if !inside(a, px, py) {
            return None;
        }
        // The template and its central-difference gradients, from one window a pixel wider.
        a.window(px, py, r + 1, &mut wide);
        let ws = side + 2;
        tpl.clear();
        ix.clear();
        iy.clear();
        let (mut gxx, mut gxy, mut gyy) = (0.0f32, 0.0f32, 0.0f32);
        for y in 1..=side {
            for x in 1..=side {
                let i = y * ws + x;
                let gx = 0.5 * (wide[i + 1] - wide[i - 1]);
                let gy = 0.5 * (wide[i + ws] - wide[i - ws]);
                tpl.push(wide[i]);
                ix.push(gx);
                iy.push(gy);
                gxx += gx * gx;
                gxy += gx * gy;
                gyy += gy * gy;
            }
        }
        let det = gxx * gyy - gxy * gxy;
        if det.abs() < 1e-9 * (gxx + gyy).powi(2).max(1e-20) {
            return None;
        }
        let mut d = (0.0f32, 0.0f32);
        for _ in 0..cfg.iterations {
            let (qx, qy) = (px + guess.0 + d.0, py + guess.1 + d.1);
            if !inside(b, qx, qy) {
                return None;
            }
            b.window(qx, qy, r, &mut cur);
            let (mut bx, mut by) = (0.0f32, 0.0f32);
            for i in 0..cur.len() {
                let diff = tpl[i] - cur[i];
                bx += diff * ix[i];
                by += diff * iy[i];
            }
            let step = ((gyy * bx - gxy * by) / det, (gxx * by - gxy * bx) / det);
            d = (d.0 + step.0, d.1 + step.1);
            if step.0.abs() + step.1.abs() < cfg.epsilon_px {
                break;
            }
        }
        guess = (guess.0 + d.0, guess.1 + d.1);
        if level > 0 {
            guess = (2.0 * guess.0, 2.0 * guess.1);
        }
    }
    let q = (p.0 + guess.0, p.1 + guess.1);
    residual_ok(&prev.levels[0], &next.levels[0], p, q, cfg).then_some(q)
}

/// Whether the windows around `p` in `a` and `q` in `b` still match.
fn residual_ok(a: &Plane, b: &Plane, p: (f32, f32), q: (f32, f32), cfg: &LkConfig) -> bool {
    let r = cfg.half_window;
    // The point must stay a half window inside the picture for its window to be real pixels.
    let m = r as f32;
    if q.0 < m || q.1 < m || q.0 > (b.width - 1) as f32 - m || q.1 > (b.height - 1) as f32 - m {
        return false;
    }
    let (mut wa, mut wb) = (Vec::new(), Vec::new());
    a.window(p.0, p.1, r, &mut wa);
    b.window(q.0, q.1, r, &mut wb);
    let n = wa.len() as f32;
    let mean = wa.iter().sum::<f32>() / n;
    let spread = wa.iter().map(|v| (v - mean).abs()).sum::<f32>() / n;
    let diff = wa.iter().zip(&wb).map(|(x, y)| (x - y).abs()).sum::<f32>() / n;
    diff <= cfg.max_residual * spread.max(1e-6)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A smooth textured plane, shifted by (sx, sy).
    fn texture(w: usize, h: usize, sx: f32, sy: f32) -> Plane {
        let mut data = Vec::with_capacity(w * h);
        for y in 0..h {
            for x in 0..w {
                let (u, v) = (x as f32 - sx, y as f32 - sy);
                // Blobs of 3-6 px on a grid: detail at the scales a part shows.
                let mut val = 100.0;
                for k in 0..40 {
                    let cx = ((k * 37) % 120) as f32 + 4.0;
                    let cy = ((k * 53) % 120) as f32 + 4.0;
                    let s = 3.0 + (k % 4) as f32;
                    let d2 = (u - cx).powi(2) + (v - cy).powi(2);
                    val += 60.0 * (-d2 / (2.0 * s * s)).exp() * if k % 2 == 0 { 1.0 } else { -1.0 };
                }
                data.push(val);
            }
        }
        Plane {
            width: w,
            height: h,
            data,
        }
    }

    /// The half-size image as first written: a clamped index per tap, summed by `sum`.
    fn half_reference(img: &Plane) -> Plane {
        let (w, h) = (img.width / 2, img.height / 2);
        let clamp = |v: isize, n: usize| v.clamp(0, n as isize - 1) as usize;
        let mut rows = Vec::with_capacity(w * img.height);
        for y in 0..img.height {
            let line = &img.data[y * img.width..(y + 1) * img.width];
            for x in 0..w {
                let c = 2 * x as isize;
                let v: f32 = (0..5)
                    .map(|i| BINOMIAL[i] * line[clamp(c + i as isize - 2, img.width)])
                    .sum();
                rows.push(v);
            }
        }
        let mut data = Vec::with_capacity(w * h);
        for y in 0..h {
            let c = 2 * y as isize;
            for x in 0..w {
                let v: f32 = (0..5)
                    .map(|i| BINOMIAL[i] * rows[clamp(c + i as isize - 2, img.height) * w + x])
                    .sum();
                data.push(v);
            }
        }
        Plane {
            width: w,
            height: h,
            data,
        }
    }

    #[test]
    fn half_size_image_is_the_reference_bit_for_bit() {
        // Odd and even sides, sides of 2 and 3 (every tap clamped), zeros and noise-like values.
        for (w, h) in [(37, 29), (64, 48), (2, 3), (3, 2), (5, 7)] {
            let mut img = texture(w, h, 0.3, 0.7);
            for (i, v) in img.data.iter_mut().enumerate() {
                *v = if i % 11 == 0 {
                    0.0
                } else {
                    *v + (i * 7919 % 13) as f32 / 3.0
                };
            }
            let bits = |p: &Plane| p.data.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
            let (fast, slow) = (img.half(), half_reference(&img));
            assert_eq!((fast.width, fast.height), (slow.width, slow.height));
            assert_eq!(bits(&fast), bits(&slow), "{w}x{h}");
        }
    }

    #[test]
    fn a_shift_of_several_pixels_is_recovered_to_a_twentieth_of_a_pixel() {
        let cfg = LkConfig::default();
        for (sx, sy) in [(0.3, -0.2), (4.6, 2.1), (-11.3, 7.8)] {
            let a = Pyramid::new(texture(128, 128, 0.0, 0.0), 4, 7);
            let b = Pyramid::new(texture(128, 128, sx, sy), 4, 7);
            let q = track(&a, &b, (64.0, 60.0), &cfg).unwrap();
            assert!((q.0 - 64.0 - sx).abs() < 0.05, "{q:?} {sx}");
            assert!((q.1 - 60.0 - sy).abs() < 0.05, "{q:?} {sy}");
        }
    }

    #[test]
    fn a_point_on_a_flat_patch_is_lost() {
        let flat = Plane {
            width: 64,
            height: 64,
            data: vec![10.0; 64 * 64],
        };
        let a = Pyramid::new(flat.clone(), 3, 7);
        let b = Pyramid::new(flat, 3, 7);
        assert_eq!(track(&a, &b, (32.0, 32.0), &LkConfig::default()), None);
    }

    #[test]
    fn corners_of_a_bright_square_are_found_at_its_corners() {
        let mut data = vec![0.0f32; 64 * 64];
        for y in 20..40 {
            for x in 20..40 {
                data[y * 64 + x] = 100.0;
            }
        }
        let img = Plane {
            width: 64,
            height: 64,
            data,
        };
        let found = corners(&img, 2, |_, _| true, 4, 5.0);
        assert_eq!(found.len(), 4);
        for (x, y) in found {
            let near = |v: f32| (v - 19.5).abs() <= 1.5 || (v - 39.5).abs() <= 1.5;
            assert!(near(x) && near(y), "{x} {y}");
        }
    }
}
