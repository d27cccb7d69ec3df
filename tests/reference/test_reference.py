"""latchtime checked against reference libraries from the package registry.

Each test feeds the same numbers to latchtime (through `latchtime inspect`) and to a
general-purpose reference, and states its tolerance and why.
"""

import glob
import pathlib
import struct

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
    ("WAV", "PCM_U8", "FILE"), ("WAV", "PCM_16", "FILE"), ("WAV", "PCM_24", "FILE"),
    ("WAV", "PCM_32", "FILE"), ("WAV", "FLOAT", "FILE"), ("WAV", "DOUBLE", "FILE"),
    ("WAVEX", "PCM_16", "FILE"), ("WAVEX", "PCM_24", "FILE"), ("WAVEX", "FLOAT", "FILE"),
    ("FLAC", "PCM_16", "FILE"), ("FLAC", "PCM_24", "FILE"), ("AIFF", "PCM_16", "FILE"),
    # Issue 15: RF64, big-endian RIFX, G.711 mu-law and A-law.
    ("RF64", "PCM_16", "FILE"), ("RF64", "PCM_24", "FILE"), ("RF64", "FLOAT", "FILE"),
    ("WAV", "PCM_16", "BIG"), ("WAV", "PCM_24", "BIG"), ("WAV", "FLOAT", "BIG"),
    ("WAV", "ULAW", "FILE"), ("WAV", "ALAW", "FILE"), ("WAVEX", "ULAW", "FILE"),
    ("RF64", "ALAW", "FILE"),
]


@pytest.mark.parametrize("container,subtype,endian", SOUNDFILE_FORMATS)
def test_decoding_equals_soundfile(tmp_path, container, subtype, endian):
    # Source: soundfile (libsndfile) reads integer PCM scaled by 2^(bits-1), as latchtime does;
    # integer formats must agree exactly, float formats exactly too (f32 -> f64 is exact), and
    # mu-law and A-law through their 16-bit G.711 expansions, exactly.
    rate = 96_000
    data = np.clip(RNG.normal(0, 0.3, size=(4000, 2)), -1, 0.999)
    ext = {"WAV": "wav", "WAVEX": "wav", "RF64": "wav", "FLAC": "flac", "AIFF": "aiff"}[container]
    path = tmp_path / f"fixture-{container}-{subtype}-{endian}.{ext}"
    soundfile.write(path, data, rate, subtype=subtype, format=container, endian=endian)
    magic = path.read_bytes()[:4]
    if endian == "BIG":
        assert magic == b"RIFX", magic
    if container == "RF64":
        assert magic == b"RF64", magic
    ref, ref_rate = soundfile.read(path, dtype="float64", always_2d=True)
    for ch in range(2):
        code, meta, got, err = decode(tmp_path, path, ch)
        assert code == 0, err
        assert meta["sample_rate_hz"] == ref_rate
        assert np.array_equal(got, ref[:, ch]), f"{container}/{subtype} channel {ch}: max diff {np.max(np.abs(got - ref[:, ch]))}"


def wav_bytes(samples_le, channels=1, rate=48_000, bits=16, block_align=None, data_size=None, riff_size=None):
    """A PCM WAV built field by field (traps no writer makes on purpose)."""
    container = (bits + 7) // 8
    align = channels * container if block_align is None else block_align
    fmt = struct.pack("<HHIIHH", 1, channels, rate, rate * align, align, bits)
    size = len(samples_le) if data_size is None else data_size
    body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt + b"data" + struct.pack("<I", size) + samples_le
    return b"RIFF" + struct.pack("<I", len(body) if riff_size is None else riff_size) + body


def test_odd_widths_block_align_and_unfinalised_headers_read_as_soundfile(tmp_path):
    # Source: soundfile 0.14 (libsndfile 1.2.2). It reads 12- and 20-bit PCM as their 16- and
    # 24-bit containers and ignores an inconsistent block_align (a frame is channels x
    # container bytes). It reads a data size of 0xFFFFFFFF to the end of the file, and a data
    # size of 0 as no samples: there latchtime recovers the samples, checked against soundfile
    # reading the same samples with a finalised header.
    codes = (RNG.normal(0, 6000, size=(3000, 2)).clip(-32768, 32767).astype("<i2") & ~0xF).astype("<i2")
    le16 = codes.tobytes()
    le24 = b"".join(int(c).to_bytes(4, "little", signed=True)[:3] for c in (codes.astype(np.int32) << 8).ravel())
    cases = {
        "pcm12.wav": (wav_bytes(le16, channels=2, bits=12), None),
        "pcm20.wav": (wav_bytes(le24, channels=2, bits=20), None),
        "block-align-8.wav": (wav_bytes(le16, channels=2, block_align=8), None),
        "block-align-2.wav": (wav_bytes(le16, channels=2, block_align=2), None),
        "unfinalised-ffffffff.wav": (wav_bytes(le16 + b"\x01", channels=2, data_size=0xFFFFFFFF, riff_size=0xFFFFFFFF), None),
        "unfinalised-zero.wav": (wav_bytes(le16 + b"\x01", channels=2, data_size=0, riff_size=0), wav_bytes(le16, channels=2)),
    }
    for name, (bytes_, finalised) in cases.items():
        path = tmp_path / name
        path.write_bytes(bytes_)
        ref_path = path
        if finalised is not None:
            ref_path = tmp_path / f"finalised-{name}"
            ref_path.write_bytes(finalised)
            assert soundfile.read(path)[0].size == 0, "soundfile reads no samples from a zero data size"
        ref, _ = soundfile.read(ref_path, dtype="float64", always_2d=True)
        assert ref.shape == (3000, 2), name
        for ch in range(2):
            code, _, got, err = decode(tmp_path, path, ch)
            assert code == 0, err
            assert np.array_equal(got, ref[:, ch]), f"{name} channel {ch}"


def test_lossy_and_flac_fixtures_decode_to_their_wav_length(tmp_path):
    # Source: soundfile reads the FLAC and the WAV it was made from identically; the lossy
    # files, once their encoder delay and padding are removed, are as long as that WAV
    # (tests/data/README.md says how each was made).
    data_dir = ROOT / "tests" / "data"
    wav, _ = soundfile.read(data_dir / "click-48kHz-16bit-mono.wav", dtype="float64")
    flac, _ = soundfile.read(data_dir / "click-48kHz-mono.flac", dtype="float64")
    assert np.array_equal(wav, flac)
    code, _, got, err = decode(tmp_path, data_dir / "click-48kHz-mono.flac")
    assert code == 0 and np.array_equal(got, flac), err
    for name in ["click-48kHz-mono-lame.mp3", "click-48kHz-mono-ffmpeg-aac.m4a", "click-48kHz-mono-oggenc.ogg"]:
        code, meta, got, err = decode(tmp_path, data_dir / name)
        assert code == 0, err
        assert got.size == wav.size, name


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
    # Known gaps, listed in the README: integer widths above 32 bits (4) and below 8 (1), and a
    # truncated data chunk that scipy reads in part and latchtime refuses on purpose. This
    # guards that the gap does not grow.
    assert counts.get("peer reads, latchtime rejects", 0) <= 6, outcomes
    assert counts.get("same", 0) >= 12, outcomes


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
    # Two files hold 24 valid bits in 4-byte containers; libsndfile ignores the valid-bits
    # field and reads the whole container, and so does latchtime.
    assert "DIFFERENT" not in outcomes.values(), outcomes
    assert counts.get("same", 0) >= 16, outcomes


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
