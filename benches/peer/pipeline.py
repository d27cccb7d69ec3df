"""A hand-written numpy/scipy pipeline over a folder of trials, the peer that
`cargo bench --bench peer` times latchtime against. It does what a person would write in
an afternoon, one trial after another, on one core:

- audio: soundfile read (float64), 4th-order Butterworth band-pass 2-20 kHz run forwards and
  backwards (scipy.signal.sosfiltfilt), Hilbert envelope (scipy.signal.hilbert), peaks of
  the envelope above median + 10 x MAD-sigma at least 1 ms apart (scipy.signal.find_peaks);
  the first peak is the click;
- frames: the frames CSV read with numpy.loadtxt, the brightness derivative per second, and
  the first frame where its magnitude exceeds 6 x its MAD-sigma (the release).

Usage: python pipeline.py FOLDER OUT.csv. Prints the seconds of CPU time the loop over the
trials took (time.process_time, imports excluded) on its last line.
"""

import csv
import sys
import time
from pathlib import Path

import numpy as np
import soundfile
from scipy import signal

BAND_HZ = (2_000.0, 20_000.0)
ORDER = 4
PEAK_MADS = 10.0
PEAK_SPACING_S = 1e-3
RELEASE_MADS = 6.0


def mad_sigma(x):
    """Robust standard deviation: 1.4826 x median absolute deviation (normal consistency)."""
    return 1.4826 * np.median(np.abs(x - np.median(x)))


def first_click_s(path):
    audio, rate = soundfile.read(path, dtype="float64", always_2d=True)
    x = audio[:, 0]
    sos = signal.butter(ORDER, BAND_HZ, btype="bandpass", fs=rate, output="sos")
    envelope = np.abs(signal.hilbert(signal.sosfiltfilt(sos, x)))
    level = np.median(envelope) + PEAK_MADS * mad_sigma(envelope)
    peaks, _ = signal.find_peaks(
        envelope, height=level, distance=max(1, int(PEAK_SPACING_S * rate))
    )
    return (peaks[0] / rate if len(peaks) else float("nan")), len(peaks)


def release_s(path):
    table = np.loadtxt(path, delimiter=",", skiprows=1, usecols=(1, 2))
    t, brightness = table[:, 0], table[:, 1]
    rate = np.diff(brightness) / np.diff(t)
    above = np.flatnonzero(np.abs(rate - np.median(rate)) > RELEASE_MADS * mad_sigma(rate))
    return t[above[0]] if len(above) else float("nan")


def main():
    folder, out = Path(sys.argv[1]), Path(sys.argv[2])
    start = time.process_time()
    rows = []
    for wav in sorted(folder.glob("*.wav")):
        frames = wav.with_suffix(".frames.csv")
        click, peaks = first_click_s(wav)
        release = release_s(frames) if frames.exists() else float("nan")
        rows.append((wav.stem, click, peaks, release))
    with out.open("w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["trial", "click_s", "peaks", "release_s"])
        w.writerows(rows)
    print(f"{time.process_time() - start:.3f}")


if __name__ == "__main__":
    main()
