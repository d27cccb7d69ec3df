"""Writes the small H.264 (and one HEVC) test streams of this folder and the per-frame luma
sums PyAV's decoder (FFmpeg's libavcodec) gives for them, in reference-sums.json.

Run from this folder with PyAV installed (`pip install av numpy`): `python make.py`.
Each stream: 64 x 48 px, a bright bar 6 px wide moving 1 px a frame across a dim
gradient, yuv420p, 240 frames per second (time base 1/240 s, or 1/90000 for the .mov).
"""
import json

import av
import numpy as np

W, H, N = 64, 48, 40


def picture(k):
    y, x = np.mgrid[0:H, 0:W]
    grey = 30 + x + y // 2
    bar = (x >= 4 + k) & (x < 10 + k)
    grey = np.where(bar, 220, grey).astype(np.uint8)
    return np.stack([grey, grey, grey], axis=-1)


def write(name, codec, options, time_base, step, skip=()):
    with av.open(name, "w") as out:
        s = out.add_stream(codec, rate=240, options=options)
        s.width, s.height, s.pix_fmt = W, H, "yuv420p"
        s.time_base = time_base
        s.codec_context.time_base = time_base
        for k in range(N):
            if k in skip:
                continue
            f = av.VideoFrame.from_ndarray(picture(k), format="rgb24")
            f.pts = k * step
            f.time_base = time_base
            for p in s.encode(f):
                out.mux(p)
        for p in s.encode(None):
            out.mux(p)


def sums(name):
    """Per-frame luma sums and presentation times (s) as PyAV decodes them."""
    out = []
    with av.open(name) as c:
        for f in c.decode(video=0):
            # The Y plane as coded (no range or colour conversion): the first H rows of
            # the yuv420p array.
            y = f.to_ndarray()[: f.height]
            out.append({"time_s": round(float(f.time), 9), "luma_sum": int(y.astype(np.int64).sum())})
    return out


from fractions import Fraction

STREAMS = [
    ("bar-64x48-40frames-240fps-x264-baseline.mp4", "libx264",
     {"profile": "baseline", "preset": "veryfast", "crf": "23"}, Fraction(1, 240), 1, ()),
    ("bar-64x48-40frames-240fps-x264-high-bframes.mp4", "libx264",
     {"profile": "high", "preset": "medium", "bf": "3", "crf": "23"}, Fraction(1, 240), 1, ()),
    ("bar-64x48-39frames-240fps-x264-high-bframes-frame-20-dropped.mov", "libx264",
     {"profile": "high", "preset": "medium", "bf": "3", "crf": "23"}, Fraction(1, 90000), 375, (20,)),
]

if __name__ == "__main__":
    ref = {"decoder": f"PyAV {av.__version__} (libavcodec {'.'.join(map(str, av.library_versions['libavcodec']))})",
           "streams": {}}
    for name, codec, opts, tb, step, skip in STREAMS:
        write(name, codec, opts, tb, step, skip)
        ref["streams"][name] = sums(name)
    write("bar-64x48-40frames-240fps-x265.mp4", "libx265", {"preset": "ultrafast", "x265-params": "log-level=none"},
          Fraction(1, 240), 1)
    with open("reference-sums.json", "w") as f:
        f.write(json.dumps(ref, separators=(",", ":")).replace("},{", "},\n{") + "\n")


def faststart_cut():
    """The baseline stream with its moov box first (faststart), cut at 60 % of its bytes: the
    sample table lists samples past the end of the file."""
    name = "bar-64x48-40frames-240fps-x264-baseline-faststart-cut-at-60-percent.mp4"
    whole = "faststart.mp4"
    with av.open(whole, "w", options={"movflags": "faststart"}) as out:
        s = out.add_stream("libx264", rate=240, options={"profile": "baseline", "crf": "23"})
        s.width, s.height, s.pix_fmt = W, H, "yuv420p"
        for k in range(N):
            f = av.VideoFrame.from_ndarray(picture(k), format="rgb24")
            f.pts = k
            f.time_base = Fraction(1, 240)
            for p in s.encode(f):
                out.mux(p)
        for p in s.encode(None):
            out.mux(p)
    data = open(whole, "rb").read()
    open(name, "wb").write(data[: len(data) * 6 // 10])
    import os
    os.remove(whole)


if __name__ == "__main__":
    faststart_cut()
