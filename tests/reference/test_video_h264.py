"""H.264 in MP4/MOV against PyAV (FFmpeg's libavcodec): streams encoded here with PyAV's
libx264, decoded by PyAV and by `latchtime inspect video-sums`; every frame's Y-plane sum
and frame time must agree exactly. Skipped when the binary was built without `--features h264`.
"""
from fractions import Fraction

import av
import numpy as np
import pytest

from conftest import latchtime

FPS = 240


def picture(k, width, height, rng):
    """A bright bar moving 2 px a frame over a noisy gradient, RGB."""
    y, x = np.mgrid[0:height, 0:width]
    grey = 30 + (x * 120) // width + y // 2 + rng.integers(0, 12, size=(height, width))
    grey = np.where((x >= 3 + 2 * k) & (x < 11 + 2 * k), 225, grey).astype(np.uint8)
    return np.stack([grey, grey, grey], axis=-1)


def encode(path, width, height, frames, options, drop=()):
    rng = np.random.default_rng(17)
    tb = Fraction(1, 90000)
    with av.open(str(path), "w") as out:
        s = out.add_stream("libx264", rate=FPS, options=options)
        s.width, s.height, s.pix_fmt = width, height, "yuv420p"
        s.time_base = tb
        s.codec_context.time_base = tb
        for k in range(frames):
            img = picture(k, width, height, rng)
            if k in drop:
                continue
            f = av.VideoFrame.from_ndarray(img, format="rgb24")
            f.pts, f.time_base = k * 90000 // FPS, tb
            for p in s.encode(f):
                out.mux(p)
        for p in s.encode(None):
            out.mux(p)


def pyav_frames(path):
    """(time_s, Y-plane sum) per frame in display order, as PyAV decodes them."""
    with av.open(str(path)) as c:
        return [(float(f.time), int(f.to_ndarray()[: f.height].astype(np.int64).sum()))
                for f in c.decode(video=0)]


CASES = [
    # (name, width, height, frames, x264 options, dropped frames)
    ("baseline-64x48.mp4", 64, 48, 30, {"profile": "baseline", "crf": "20"}, ()),
    # Not a multiple of 16: the SPS crops the coded picture.
    ("high-bframes-100x60.mp4", 100, 60, 30, {"profile": "high", "bf": "3", "crf": "20"}, ()),
    ("main-cavlc-bframes-drop.mov", 96, 64, 30,
     {"profile": "main", "bf": "2", "x264-params": "cabac=0:b-pyramid=none"}, (7, 8)),
]


@pytest.mark.parametrize("name,width,height,frames,options,drop", CASES)
def test_h264_luma_sums_equal_pyav(tmp_path, name, width, height, frames, options, drop):
    # Source: PyAV (libavcodec's H.264 decoder), the Y plane as coded. A bit-exact decoder
    # gives the same integer sums; the times are the container's, less the first frame's.
    path = tmp_path / name
    encode(path, width, height, frames, options, drop)
    code, out, err = latchtime("inspect", "video-sums", "--video", path, check=False)
    if code != 0 and "--features h264" in err:
        pytest.skip("latchtime built without the h264 feature")
    assert code == 0, err
    want = pyav_frames(path)
    got = out["frames"]
    assert out["container_fps"] == FPS
    assert len(got) == len(want) == frames - len(drop)
    t0 = want[0][0]
    for g, (t_s, luma_sum) in zip(got, want):
        assert g["luma_sum"] == luma_sum, (g, t_s)
        assert abs(g["index"] / FPS - (t_s - t0)) < 1e-6, (g, t_s)
    assert [g["index"] for g in got] == [k for k in range(frames) if k not in drop]
