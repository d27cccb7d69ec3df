"""How well can any energy-type detector hear a weak click at 48 kHz? (Not run by CI.)

Simulates the click model of `src/synth.rs` (`add_click`: three decaying modes at
3-19.2 kHz plus a short burst of hiss, peak normalised to the SNR over unit white noise) and
measures, with thresholds taken from the empirical maxima of noise alone (so no Bonferroni
approximation enters), the share of clicks that clear the level of one search:

- of the 60 ms either side of a strongest click at 2/5 of `click_false_alarm` (0.002), the
  second-click search before the split;
- of the 30 ms after it at the same chance, and of the 30 ms before it at a tenth (0.0005),
  the split searches.

Statistics compared, all on the 1-20 kHz band (4th-order Butterworth, causal):
trailing energy over 12, 24 (latchtime's 0.5 ms) and 48 samples; an exponentially weighted
energy (time constant 0.35 ms); the largest per-bin power of a 32-sample Hann STFT (hop 4,
bins 1.5-20 kHz). The model and the script are ours, not a reference: they say what the
detector can do against the synthetic clicks `validate` scores, nothing about real clicks.

Run: python3 calibration/detection-limit.py (numpy and scipy; under a minute on 2 cores).
"""

import numpy as np
import scipy.signal as ss

FS = 48_000.0
PAD = 300  # samples of filter settling before each stretch
HP = ss.butter(4, 1000, "highpass", fs=FS, output="sos")
LP = ss.butter(4, 20000, "lowpass", fs=FS, output="sos")
rng = np.random.default_rng(7)


def click(peak):
    """One click as `add_click` makes it, peak magnitude `peak`."""
    n = int(4e-3 * FS)
    tau = np.maximum(np.arange(n) / FS - rng.uniform(0, 1 / FS), 0)
    ring = np.zeros(n)
    for _ in range(3):
        f, a, d = rng.uniform(3000, 0.4 * FS), rng.uniform(0.3, 1), rng.uniform(0.2e-3, 0.6e-3)
        ring += a * np.exp(-tau / d) * np.sin(2 * np.pi * f * tau)
    hiss = 0.5 * np.exp(-tau / 0.15e-3) * rng.standard_normal(n)
    s = (1 - np.exp(-tau / 20e-6)) * (ring + hiss)
    return s * peak / np.abs(s).max()


def band(x):
    return ss.sosfilt(LP, ss.sosfilt(HP, x, axis=1), axis=1)[:, PAD:]


def flat(z, n):
    c = np.cumsum(z * z, axis=1)
    return c[:, n:] - c[:, :-n]


def expo(z, tau_s=0.35e-3):
    a = np.exp(-1 / (tau_s * FS))
    y = ss.lfilter([1 - a], [1, -a], (z * z)[:, ::-1], axis=1)[:, ::-1]
    return y[:, : -int(8 * tau_s * FS)]


def stft_power(z, n=32, hop=4):
    f, _, zz = ss.stft(z, fs=FS, window="hann", nperseg=n, noverlap=n - hop,
                       boundary=None, padded=False, axis=1)
    return np.abs(zz[:, (f >= 1500) & (f <= 20000), :]) ** 2


# Each bin's noise power, measured once on noise alone.
BIN_NOISE = stft_power(band(rng.standard_normal((500, 3000)))).mean(axis=(0, 2), keepdims=True)


def stft(z):
    return stft_power(z) / BIN_NOISE


STATS = {
    "energy 0.25 ms": lambda z: flat(z, 12),
    "energy 0.5 ms": lambda z: flat(z, 24),
    "energy 1 ms": lambda z: flat(z, 48),
    "exp-weighted 0.35 ms": expo,
    "STFT max bin": stft,
}


def maxima(z):
    out = {}
    for name, f in STATS.items():
        v = f(z)
        out[name] = v.reshape(v.shape[0], -1).max(axis=1)
    return out


def null_maxima(length, count, chunk=4000):
    parts = {k: [] for k in STATS}
    for start in range(0, count, chunk):
        m = maxima(band(rng.standard_normal((min(chunk, count - start), length + PAD))))
        for k in STATS:
            parts[k].append(m[k])
    return {k: np.concatenate(v) for k, v in parts.items()}


def hit_rate(length, levels, lo_db, hi_db, count=3000):
    x = rng.standard_normal((count, length + PAD))
    for row in x:
        c = click(10 ** (rng.uniform(lo_db, hi_db) / 20))
        at = PAD + rng.integers(0, length - len(c))
        row[at:at + len(c)] += c
    m = maxima(band(x))
    return {k: float((m[k] > levels[k]).mean()) for k in STATS}


for label, length_ms, chance, nulls in [
    ("60 ms either side, chance 0.002", 60, 0.002, 20000),
    ("30 ms after, chance 0.002", 30, 0.002, 20000),
    ("30 ms before, chance 0.0005", 30, 0.0005, 40000),
]:
    n = int(length_ms * 1e-3 * FS)
    null = null_maxima(n, nulls)
    levels = {k: np.quantile(v, 1 - chance) for k, v in null.items()}
    for lo, hi in [(10, 13), (13, 16)]:
        rates = hit_rate(n, levels, lo, hi)
        print(f"{label}, clicks {lo}-{hi} dB: "
              + ", ".join(f"{k} {v:.3f}" for k, v in rates.items()), flush=True)
