"""latchtime checked against reference libraries from the package registry.

Each test feeds the same numbers to latchtime (through `latchtime inspect`) and to a
general-purpose reference, and states its tolerance and why.
"""

import glob
import pathlib

import numpy as np
import pytest
import scipy.io.wavfile
import scipy.optimize
import scipy.signal
import scipy.stats
import soundfile
from obspy.signal.trigger import aic_simple

from conftest import ROOT, latchtime, read_raw, write_raw

RNG = np.random.default_rng(20261201)


def decode(tmp_path, path, channel=0):
    out = tmp_path / "decoded.f64"
    code, meta, err = latchtime("inspect", "decode", "--audio", path, "--channel", channel, "--out", out, check=False)
    return code, meta, (read_raw(out) if code == 0 else None), err


# --- decoding: soundfile (libsndfile) is the reference -------------------------------------

SOUNDFILE_FORMATS = [
    ("WAV", "PCM_U8"), ("WAV", "PCM_16"), ("WAV", "PCM_24"), ("WAV", "PCM_32"),
    ("WAV", "FLOAT"), ("WAV", "DOUBLE"), ("WAVEX", "PCM_16"), ("WAVEX", "PCM_24"),
    ("WAVEX", "FLOAT"), ("FLAC", "PCM_16"), ("FLAC", "PCM_24"), ("AIFF", "PCM_16"),
]


@pytest.mark.parametrize("container,subtype", SOUNDFILE_FORMATS)
def test_decoding_equals_soundfile(tmp_path, container, subtype):
    # Source: soundfile (libsndfile) reads integer PCM scaled by 2^(bits-1), as latchtime does;
    # integer formats must agree exactly, float formats exactly too (f32 -> f64 is exact).
    rate = 96_000
    data = np.clip(RNG.normal(0, 0.3, size=(4000, 2)), -1, 0.999)
    ext = {"WAV": "wav", "WAVEX": "wav", "FLAC": "flac", "AIFF": "aiff"}[container]
    path = tmp_path / f"fixture-{container}-{subtype}.{ext}"
    soundfile.write(path, data, rate, subtype=subtype, format=container)
    ref, ref_rate = soundfile.read(path, dtype="float64", always_2d=True)
    for ch in range(2):
        code, meta, got, err = decode(tmp_path, path, ch)
        assert code == 0, err
        assert meta["sample_rate_hz"] == ref_rate
        assert np.array_equal(got, ref[:, ch]), f"{container}/{subtype} channel {ch}: max diff {np.max(np.abs(got - ref[:, ch]))}"


def test_shipped_sample_audio_decodes_as_soundfile_reads_it(tmp_path):
    # Source: soundfile; the shipped WAVs are 16-bit, 24-bit and 32-bit float.
    files = sorted((ROOT / "sample-audio").glob("*.wav"))
    assert len(files) >= 10
    for path in files:
        ref, _ = soundfile.read(path, dtype="float64", always_2d=True)
        code, _, got, err = decode(tmp_path, path)
        assert code == 0, err
        assert np.array_equal(got, ref[:, 0]), path.name


# --- a peer's corpus: the WAV files shipped in scipy's wheel, and hound's test samples -----

def scipy_normalised(path):
    rate, data = scipy.io.wavfile.read(path)
    data = np.atleast_2d(data.T).T if data.ndim == 1 else data
    if data.dtype == np.uint8:
        return rate, (data.astype(np.float64) - 128.0) / 128.0
    if data.dtype.kind == "i":
        return rate, data.astype(np.float64) / 2.0 ** (8 * data.dtype.itemsize - 1)
    return rate, data.astype(np.float64)


def peer_corpus_outcomes(tmp_path, files, reader):
    outcomes = {}
    for path in files:
        try:
            rate, ref = reader(path)
            peer_ok = True
        except Exception:
            peer_ok = False
        code, meta, got, err = decode(tmp_path, path)
        assert code in (0, 1), f"{path}: latchtime crashed ({code}): {err}"
        if code == 1:
            assert pathlib.Path(path).name in err, f"{path}: error does not name the file: {err}"
        if peer_ok and code == 0:
            col = ref[:, 0] if ref.ndim == 2 else ref
            same = got.shape == col.shape and np.allclose(got, col, rtol=0, atol=2.0 ** -20)
            outcomes[pathlib.Path(path).name] = "same" if same else "DIFFERENT"
        elif peer_ok:
            outcomes[pathlib.Path(path).name] = "peer reads, latchtime rejects"
        elif code == 0:
            outcomes[pathlib.Path(path).name] = "peer rejects, latchtime reads"
        else:
            outcomes[pathlib.Path(path).name] = "both reject"
    return outcomes


def test_scipy_wheel_wav_corpus(tmp_path):
    # Peer: scipy.io.wavfile on the WAVs in scipy's own test data. Integer data compared after
    # scaling to full scale; 2^-20 tolerance covers scipy's left-justified odd widths.
    data_dir = pathlib.Path(scipy.io.__file__).parent / "tests" / "data"
    files = sorted(glob.glob(str(data_dir / "*.wav")))
    assert files, "scipy wheel ships no WAV test files"
    outcomes = peer_corpus_outcomes(tmp_path, files, scipy_normalised)
    counts = {k: list(outcomes.values()).count(k) for k in set(outcomes.values())}
    print(f"\nscipy corpus ({len(files)} files): {counts}")
    for name, outcome in sorted(outcomes.items()):
        print(f"  {outcome:32} {name}")
    assert "DIFFERENT" not in outcomes.values(), outcomes
    # Known gaps (big-endian RIFX, RF64, widths other than 8/16/24/32/64 bits) are listed in the
    # README; this guards that the gap does not grow.
    assert counts.get("peer reads, latchtime rejects", 0) <= 13, outcomes
    assert counts.get("same", 0) >= 5, outcomes


def test_hound_package_test_samples(tmp_path):
    # Peer: soundfile on the WAV samples that ship inside the hound crate's package.
    files = sorted(glob.glob(str(pathlib.Path.home() / ".cargo/registry/src/*/hound-3.*/testsamples/*.wav")))
    if not files:
        pytest.skip("hound's package sources are not unpacked in this cargo home")

    def reader(path):
        data, rate = soundfile.read(path, dtype="float64", always_2d=True)
        return rate, data

    outcomes = peer_corpus_outcomes(tmp_path, files, reader)
    counts = {k: list(outcomes.values()).count(k) for k in set(outcomes.values())}
    print(f"\nhound corpus ({len(files)} files): {counts}")
    for name, outcome in sorted(outcomes.items()):
        print(f"  {outcome:32} {name}")
    # Two files hold 24-bit samples right-justified in 4-byte containers (bytes a0 ff ff 00 =
    # -96, as hound's own tests state); libsndfile ignores the valid-bits field and reads the
    # container as 32-bit. latchtime follows the file's stated 24 valid bits, as hound does.
    right_justified = {"pcmwaveformat-24bit-4byte-48kHz-stereo.wav", "waveformatextensible-24bit-4byte-48kHz-stereo.wav"}
    different = {n for n, o in outcomes.items() if o == "DIFFERENT"}
    assert different <= right_justified, outcomes
    assert counts.get("same", 0) >= 10, outcomes


# --- zero-phase filter: scipy.signal.butter + sosfiltfilt --------------------------------

@pytest.mark.parametrize("rate,corner", [(44_100, 1000.0), (96_000, 1000.0), (250_000, 2000.0)])
def test_highpass_matches_scipy_sosfiltfilt(tmp_path, rate, corner):
    # Source: scipy.signal.butter(4, corner, 'highpass', fs=rate, output='sos') and
    # sosfiltfilt (odd padding, default padlen, steady-state initial conditions). Different
    # factorisations of the same filter agree to rounding: tolerance 1e-9 of full scale.
    n = 20_000
    t = np.arange(n) / rate
    x = 0.01 + 0.2 * np.sin(2 * np.pi * 50 * t) + RNG.normal(0, 0.05, n)
    write_raw(tmp_path / "x.f64", x)
    _, meta, _ = latchtime("inspect", "highpass", "--input", tmp_path / "x.f64", "--out", tmp_path / "y.f64",
                           "--sample-rate-hz", rate, "--corner-hz", corner)
    ours = read_raw(tmp_path / "y.f64")
    sos = scipy.signal.butter(4, corner, "highpass", fs=rate, output="sos")
    ref = scipy.signal.sosfiltfilt(sos, x)
    assert np.max(np.abs(ours - ref)) < 1e-9
    # The designs have the same response.
    w = np.linspace(10, rate / 2 * 0.99, 200)
    _, h_ref = scipy.signal.sosfreqz(sos, worN=w, fs=rate)
    _, h_ours = scipy.signal.sosfreqz(np.array(meta["sos"]), worN=w, fs=rate)
    assert np.max(np.abs(np.abs(h_ours) - np.abs(h_ref))) < 1e-9
    # Causal variant: scipy.signal.sosfilt from sosfilt_zi scaled by the first sample.
    latchtime("inspect", "highpass", "--input", tmp_path / "x.f64", "--out", tmp_path / "c.f64",
              "--sample-rate-hz", rate, "--corner-hz", corner, "--causal")
    causal_ref, _ = scipy.signal.sosfilt(sos, x, zi=scipy.signal.sosfilt_zi(sos) * x[0])
    assert np.max(np.abs(read_raw(tmp_path / "c.f64") - causal_ref)) < 1e-9


# --- AIC onset picker: obspy.signal.trigger.aic_simple -----------------------------------

def aic_case(n, onset, quiet=0.01, loud=1.0):
    x = RNG.normal(0, quiet, n)
    x[onset:] = RNG.normal(0, loud, n - onset)
    return x


@pytest.mark.parametrize("n,onset", [(400, 250), (400, 3), (400, 396), (64, 32), (2000, 1000), (50, 10)])
def test_aic_picks_the_same_sample_as_obspy(tmp_path, n, onset):
    # Source: obspy.signal.trigger.aic_simple (Maeda 1985). Its last element repeats the one
    # before (documented), and its first element is degenerate (variance of one sample), so
    # the argmin is taken over 1 .. n-2, the range latchtime searches.
    x = aic_case(n, onset)
    write_raw(tmp_path / "a.f64", x)
    _, out, _ = latchtime("inspect", "aic", "--input", tmp_path / "a.f64")
    ref = aic_simple(x)
    ref_pick = 1 + int(np.argmin(ref[1:n - 1]))
    assert abs(out["onset_index"] - ref_pick) <= 1, (out, ref_pick)
    assert abs(out["onset_index"] - onset) <= 3


def test_aic_edge_traps(tmp_path):
    # Traps of such pickers: a window too short to pick, and a one-sample event.
    write_raw(tmp_path / "short.f64", [0.0, 1.0, 0.0])
    _, out, _ = latchtime("inspect", "aic", "--input", tmp_path / "short.f64")
    assert out["onset_index"] is None
    x = RNG.normal(0, 0.01, 300)
    x[150] = 1.0
    write_raw(tmp_path / "spike.f64", x)
    _, out, _ = latchtime("inspect", "aic", "--input", tmp_path / "spike.f64")
    ref = aic_simple(x)
    assert out["onset_index"] is not None
    assert abs(out["onset_index"] - (1 + int(np.argmin(ref[1:299])))) <= 1


# --- damped-oscillation fit: scipy.optimize.curve_fit ------------------------------------

def damped(t, c, a, b, s, w):
    return c + np.exp(-s * t) * (a * np.cos(w * t) + b * np.sin(w * t))


@pytest.mark.parametrize("fps,f_hz,ratio,noise", [(1000, 60.0, 0.5, 0.0), (2000, 90.0, 0.7, 0.3), (5000, 45.0, 0.4, 0.3)])
def test_damped_fit_agrees_with_curve_fit(tmp_path, fps, f_hz, ratio, noise):
    # Source: scipy.optimize.curve_fit (Levenberg-Marquardt, MINPACK) of the same model on
    # the same samples. Without noise both must return the truth (1e-6); with noise they must
    # agree within two of latchtime's reported standard uncertainties.
    s = -np.log(ratio) * f_hz
    w = 2 * np.pi * f_hz
    t = np.arange(int(0.12 * fps)) / fps
    y = damped(t, 50.0, 20.0, 20.0 * s / w, s, w) + RNG.normal(0, noise, t.size) if noise else damped(t, 50.0, 20.0, 20.0 * s / w, s, w)
    write_raw(tmp_path / "y.f64", y)
    _, out, _ = latchtime("inspect", "fit", "--input", tmp_path / "y.f64", "--fps", fps, "--noise", max(noise, 1e-4))
    assert out is not None
    p, _ = scipy.optimize.curve_fit(damped, t, y, p0=[50, 20, 0, s * 1.2, w * 0.98])
    ref_ratio = np.exp(-2 * np.pi * p[3] / p[4])
    ref_f = p[4] / (2 * np.pi)
    if noise == 0.0:
        assert abs(out["amplitude_ratio"] - ratio) < 1e-6 and abs(ref_ratio - ratio) < 1e-6
        assert abs(out["frequency_hz"] - f_hz) < 1e-6
    else:
        sd = out["amplitude_ratio_sd"]
        assert sd is not None and sd > 0
        assert abs(out["amplitude_ratio"] - ref_ratio) <= 2 * sd + 1e-4, (out, ref_ratio)
        assert abs(out["frequency_hz"] - ref_f) / ref_f < 0.01


# --- group statistics: numpy and scipy.stats.bootstrap -----------------------------------

def test_group_statistics_match_numpy(tmp_path):
    # Source: numpy mean, std(ddof=1), median and quantile (linear, numpy's default);
    # scipy.stats.bootstrap percentile interval with the same resample count. The bootstrap
    # draws differ, so the interval ends agree within 10 % of its width (Monte Carlo error of
    # 2000 resamples is a few percent).
    x = RNG.gamma(4.0, 20.0, 37)
    write_raw(tmp_path / "s.f64", x)
    _, out, _ = latchtime("inspect", "stats", "--input", tmp_path / "s.f64")
    assert out["n"] == 37
    assert abs(out["mean"] - np.mean(x)) < 1e-9
    assert abs(out["sd"] - np.std(x, ddof=1)) < 1e-9
    assert abs(out["median"] - np.median(x)) < 1e-9
    assert abs(out["q1"] - np.quantile(x, 0.25)) < 1e-9
    assert abs(out["q3"] - np.quantile(x, 0.75)) < 1e-9
    boot = scipy.stats.bootstrap((x,), np.mean, n_resamples=2000, method="percentile", random_state=1)
    width = boot.confidence_interval.high - boot.confidence_interval.low
    assert abs(out["ci_low"] - boot.confidence_interval.low) < 0.1 * width
    assert abs(out["ci_high"] - boot.confidence_interval.high) < 0.1 * width
