//! Zero-phase IIR filtering. A Butterworth high-pass is designed as second-order sections by the
//! bilinear transform with frequency pre-warping (RBJ biquads with the Butterworth pole Qs), and
//! run forward then backward with odd-extension padding and steady-state initial conditions, the
//! same scheme as `scipy.signal.sosfiltfilt` (Gustafsson's initial-condition idea simplified):
//! the result has no phase shift, so filtering moves no event in time.

/// One second-order section, `a0` normalised to 1: [b0, b1, b2, a1, a2].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Section {
    pub b: [f64; 3],
    pub a: [f64; 2],
}

/// Butterworth high-pass of even `order` (2, 4, 6...) at `corner_hz` for `sample_rate_hz`.
/// The corner is clamped below 0.45 of the sample rate so the design stays stable.
pub fn butterworth_highpass(order: usize, corner_hz: f64, sample_rate_hz: f64) -> Vec<Section> {
    butterworth(order, corner_hz, sample_rate_hz, true)
}

/// Butterworth low-pass of even `order` at `corner_hz` (clamped below 0.45 of the rate).
pub fn butterworth_lowpass(order: usize, corner_hz: f64, sample_rate_hz: f64) -> Vec<Section> {
    butterworth(order, corner_hz, sample_rate_hz, false)
}

fn butterworth(order: usize, corner_hz: f64, sample_rate_hz: f64, high: bool) -> Vec<Section> {
    let order = order.max(2) & !1;
    let corner = corner_hz.clamp(1e-6 * sample_rate_hz, 0.45 * sample_rate_hz);
    let w0 = 2.0 * std::f64::consts::PI * corner / sample_rate_hz;
    let (sin, cos) = w0.sin_cos();
    (0..order / 2)
        .map(|k| {
            // Pole pair k of an order-N Butterworth prototype sits at angle pi (2k + N + 1) / 2N.
            let theta = std::f64::consts::PI * (2 * k + order + 1) as f64 / (2 * order) as f64;
            let q = -1.0 / (2.0 * theta.cos());
            let alpha = sin / (2.0 * q);
            let a0 = 1.0 + alpha;
            // RBJ biquads: the bilinear transform with the corner pre-warped.
            let b = if high {
                [(1.0 + cos) / 2.0, -(1.0 + cos), (1.0 + cos) / 2.0]
            } else {
                [(1.0 - cos) / 2.0, 1.0 - cos, (1.0 - cos) / 2.0]
            };
            Section {
                b: b.map(|v| v / a0),
                a: [-2.0 * cos / a0, (1.0 - alpha) / a0],
            }
        })
        .collect()
}

/// Steady-state states of each section for a unit step (`scipy.signal.sosfilt_zi`).
fn steady_state(sections: &[Section]) -> Vec<[f64; 2]> {
    let mut scale = 1.0;
    sections
        .iter()
        .map(|s| {
            let gain = (s.b[0] + s.b[1] + s.b[2]) / (1.0 + s.a[0] + s.a[1]);
            let z2 = s.b[2] - s.a[1] * gain;
            let z1 = s.b[1] - s.a[0] * gain + z2;
            let zi = [z1 * scale, z2 * scale];
            scale *= gain;
            zi
        })
        .collect()
}

/// Runs the cascade over `x` in place (transposed direct form II), starting from `zi * x0`.
/// All sections advance together, one sample at a time: each section's recursion is a serial
/// chain, and running them side by side lets the processor overlap the chains.
fn run(sections: &[Section], zi: &[[f64; 2]], x: &mut [f64]) {
    let Some(&x0) = x.first() else { return };
    match sections.len() {
        2 => run_fused::<2>(sections, zi, x0, x),
        4 => run_fused::<4>(sections, zi, x0, x),
        // Other cascades, one section at a time (each starts from its state for `x0`).
        _ => {
            for (s, z) in sections.chunks(1).zip(zi.chunks(1)) {
                run_fused::<1>(s, z, x0, x);
            }
        }
    }
}

/// One sample through one section (transposed direct form II).
#[inline(always)]
fn step(coef: &([f64; 3], [f64; 2]), z: &mut [f64; 2], input: f64) -> f64 {
    let ([b0, b1, b2], [a1, a2]) = *coef;
    let out = b0 * input + z[0];
    z[0] = b1 * input - a1 * out + z[1];
    z[1] = b2 * input - a2 * out;
    out
}

fn run_fused<const N: usize>(sections: &[Section], zi: &[[f64; 2]], x0: f64, x: &mut [f64]) {
    let mut z = [[0.0; 2]; N];
    let mut coef = [([0.0; 3], [0.0; 2]); N];
    for k in 0..N {
        z[k] = [zi[k][0] * x0, zi[k][1] * x0];
        coef[k] = (sections[k].b, sections[k].a);
    }
    for v in x.iter_mut() {
        let mut input = *v;
        for k in 0..N {
            input = step(&coef[k], &mut z[k], input);
        }
        *v = input;
    }
}

/// Two cascades over `x` in one pass, forward only: `first`, then `second` on its output.
/// Returns both outputs. One loop lets the processor overlap the recursions of all the
/// sections (each is bound by its own feedback latency), which two passes in turn cannot.
/// Each cascade starts from its own steady state, as two calls of [`filter_causal`] do.
pub fn filter_causal_pair(
    first: &[Section],
    second: &[Section],
    x: &[f64],
) -> (Vec<f64>, Vec<f64>) {
    match (first.len(), second.len()) {
        (2, 2) => run_pair::<2, 2>(first, second, x, true),
        _ => {
            let a = filter_causal(first, x);
            let b = filter_causal(second, &a);
            (a, b)
        }
    }
}

/// [`filter_causal_pair`] when only the second cascade's output is wanted.
pub fn filter_causal_then(first: &[Section], second: &[Section], x: &[f64]) -> Vec<f64> {
    match (first.len(), second.len()) {
        (2, 2) => run_pair::<2, 2>(first, second, x, false).1,
        _ => filter_causal(second, &filter_causal(first, x)),
    }
}

fn run_pair<const N: usize, const M: usize>(
    first: &[Section],
    second: &[Section],
    x: &[f64],
    keep_first: bool,
) -> (Vec<f64>, Vec<f64>) {
    let Some(&x0) = x.first() else {
        return (Vec::new(), Vec::new());
    };
    let load = |sections: &[Section], input0: f64| {
        let zi = steady_state(sections);
        let mut z = [[0.0; 2]; 8];
        let mut coef = [([0.0; 3], [0.0; 2]); 8];
        for (k, s) in sections.iter().enumerate().take(8) {
            z[k] = [zi[k][0] * input0, zi[k][1] * input0];
            coef[k] = (s.b, s.a);
        }
        (z, coef)
    };
    let (mut z1, c1) = load(first, x0);
    // The second cascade starts where a separate pass would: at the first cascade's first
    // output.
    let mut y0 = x0;
    for k in 0..N {
        y0 = c1[k].0[0] * y0 + z1[k][0];
    }
    let (mut z2, c2) = load(second, y0);
    let mut a = Vec::with_capacity(if keep_first { x.len() } else { 0 });
    let mut b = Vec::with_capacity(x.len());
    for &v in x {
        let mut input = v;
        for k in 0..N {
            input = step(&c1[k], &mut z1[k], input);
        }
        if keep_first {
            a.push(input);
        }
        for k in 0..M {
            input = step(&c2[k], &mut z2[k], input);
        }
        b.push(input);
    }
    (a, b)
}

/// Causal (forward-only) filtering of `x`, started from the steady state for its first sample.
/// A causal high-pass passes a broadband onset on its first sample (no pre-ringing), so onset
/// pickers run on this output; zero-phase output serves levels and peaks.
pub fn filter_causal(sections: &[Section], x: &[f64]) -> Vec<f64> {
    let mut y = x.to_vec();
    run(sections, &steady_state(sections), &mut y);
    y
}

/// Number of padding samples at each end, as scipy's default for `sosfiltfilt`.
pub fn default_padlen(sections: &[Section]) -> usize {
    let zeros_b = sections.iter().filter(|s| s.b[2] == 0.0).count();
    let zeros_a = sections.iter().filter(|s| s.a[1] == 0.0).count();
    3 * (2 * sections.len() + 1 - zeros_b.min(zeros_a))
}

/// Zero-phase filtering of `x`. Signals no longer than the padding are returned unfiltered
/// minus their mean (too short to filter meaningfully).
pub fn filtfilt(sections: &[Section], x: &[f64]) -> Vec<f64> {
    let pad = default_padlen(sections);
    let n = x.len();
    if n <= pad || sections.is_empty() {
        let mean = x.iter().sum::<f64>() / n.max(1) as f64;
        return x.iter().map(|v| v - mean).collect();
    }
    let mut ext = Vec::with_capacity(n + 2 * pad);
    ext.extend((1..=pad).rev().map(|i| 2.0 * x[0] - x[i]));
    ext.extend_from_slice(x);
    ext.extend((1..=pad).map(|i| 2.0 * x[n - 1] - x[n - 1 - i]));
    let zi = steady_state(sections);
    run(sections, &zi, &mut ext);
    ext.reverse();
    run(sections, &zi, &mut ext);
    ext.reverse();
    ext.drain(..pad);
    ext.truncate(n);
    ext
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gain_at(sections: &[Section], f_hz: f64, fs_hz: f64) -> f64 {
        let w = 2.0 * std::f64::consts::PI * f_hz / fs_hz;
        let mut g = 1.0;
        for s in sections {
            let (c1, s1, c2, s2) = (w.cos(), w.sin(), (2.0 * w).cos(), (2.0 * w).sin());
            let nr = s.b[0] + s.b[1] * c1 + s.b[2] * c2;
            let ni = -(s.b[1] * s1 + s.b[2] * s2);
            let dr = 1.0 + s.a[0] * c1 + s.a[1] * c2;
            let di = -(s.a[0] * s1 + s.a[1] * s2);
            g *= ((nr * nr + ni * ni) / (dr * dr + di * di)).sqrt();
        }
        g
    }

    #[test]
    fn a_cascade_pair_in_one_pass_equals_two_passes_exactly() {
        let hp = butterworth_highpass(4, 1000.0, 250_000.0);
        let lp = butterworth_lowpass(4, 20_000.0, 250_000.0);
        let x: Vec<f64> = (0..5000)
            .map(|i| (i as f64 * 0.37).sin() + 0.3 * (i as f64 * 0.011).cos() + 0.2)
            .collect();
        let (a, b) = filter_causal_pair(&hp, &lp, &x);
        let a_ref = filter_causal(&hp, &x);
        let b_ref = filter_causal(&lp, &a_ref);
        assert_eq!(a, a_ref);
        assert_eq!(b, b_ref);
        assert_eq!(filter_causal_then(&hp, &lp, &x), b_ref);
    }

    #[test]
    fn butterworth_is_minus_3_db_at_the_corner_and_flat_above() {
        let s = butterworth_highpass(4, 1000.0, 96_000.0);
        // Definition of the Butterworth corner: |H| = 1/sqrt(2).
        assert!((gain_at(&s, 1000.0, 96_000.0) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
        assert!((gain_at(&s, 20_000.0, 96_000.0) - 1.0).abs() < 1e-3);
        // 4th order: 24 dB per octave, so 100 Hz (3.3 octaves down) is about -80 dB.
        let g100 = 20.0 * gain_at(&s, 100.0, 96_000.0).log10();
        assert!((-82.0..-78.0).contains(&g100), "{g100}");
    }

    #[test]
    fn butterworth_lowpass_is_minus_3_db_at_the_corner() {
        let s = butterworth_lowpass(4, 20_000.0, 96_000.0);
        assert!((gain_at(&s, 20_000.0, 96_000.0) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
        assert!((gain_at(&s, 100.0, 96_000.0) - 1.0).abs() < 1e-6);
    }

    #[test]
    fn filtfilt_does_not_shift_an_impulse() {
        let s = butterworth_highpass(4, 2000.0, 48_000.0);
        let mut x = vec![0.0; 2001];
        x[1000] = 1.0;
        let y = filtfilt(&s, &x);
        let peak = y
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()))
            .map(|(i, _)| i);
        assert_eq!(peak, Some(1000));
        // Zero phase means a symmetric response.
        for k in 1..200 {
            assert!((y[1000 - k] - y[1000 + k]).abs() < 1e-9);
        }
    }

    #[test]
    fn filtfilt_removes_dc_and_a_slow_ramp() {
        let s = butterworth_highpass(4, 1000.0, 48_000.0);
        let dc = filtfilt(&s, &vec![0.3; 4800]);
        assert!(dc.iter().all(|v| v.abs() < 1e-9));
        // Two zeros at DC per section: a ramp vanishes once the edge transients die out.
        let x: Vec<f64> = (0..4800).map(|i| 0.3 + 1e-5 * i as f64).collect();
        let y = filtfilt(&s, &x);
        assert!(y[500..4300].iter().all(|v| v.abs() < 1e-6));
    }
}
