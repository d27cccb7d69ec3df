#!/usr/bin/env python3
"""Independent generator of latch-mediated spring actuation test trials.

Written from a plain description of real rigs (see README.md in this folder), without
reference to latchtime's own detectors or synthesiser.  Every trial draws its own
motion family, loading shape, release shape, noise, frame-CSV layout, timestamp format
and audio situation.  The truth of every trial goes to TRIAL.truth.json.

    make_trials.py --campaign mixed-2000 --out DIR --count 300 --seed 1

Only numpy, scipy and soundfile are used.
"""
import argparse
import json
import math
import os
import sys
import zlib

import numpy as np
import soundfile as sf
from scipy.special import betainc, beta as beta_fn

# ----------------------------------------------------------------------------------------
# campaigns (all rigs, labs and benches are invented)
# ----------------------------------------------------------------------------------------
CAMPAIGNS = {
    "mixed-2000": dict(prefix="qx7", fps=2000.0, sr=96000, subtype="PCM_16", count=300,
                       dur=(0.4, 0.8), long=False,
                       rig=dict(video_offset_s=0.0125, mic_distance_m=0.35, air_temperature_c=23.0)),
    "mixed-1000": dict(prefix="tl3", fps=1000.0, sr=48000, subtype="PCM_16", count=300,
                       dur=(0.4, 0.8), long=False,
                       rig=dict(video_offset_s=-0.004, mic_distance_m=0.60, air_temperature_c=18.5)),
    "mixed-500": dict(prefix="mb1", fps=500.0, sr=44100, subtype="PCM_16", count=300,
                      dur=(0.4, 0.8), long=False,
                      rig=dict(video_offset_s=0.021, mic_distance_m=1.20, air_temperature_c=27.0)),
    "mixed-4000": dict(prefix="vr9", fps=4000.0, sr=192000, subtype="PCM_24", count=300,
                       dur=(0.4, 0.8), long=False,
                       rig=dict(video_offset_s=0.0032, mic_distance_m=0.12, air_temperature_c=21.0)),
    "long-tracked": dict(prefix="bk", fps=None, sr=None, subtype=None, count=56,
                         dur=(2.0, 6.0), long=True,
                         rig=dict(video_offset_s=0.0, mic_distance_m=0.0, air_temperature_c=20.0)),
}

FAMILY_P_MIXED = {
    "ring": 0.16, "ring_fast": 0.10, "spring": 0.10, "bounce": 0.09, "two_mode": 0.09,
    "overdamped": 0.10, "heavy_damped": 0.08, "creep": 0.12, "failed": 0.10, "empty": 0.06,
}
FAMILY_P_LONG = {
    "ring": 0.20, "ring_fast": 0.08, "spring": 0.15, "bounce": 0.10, "two_mode": 0.12,
    "overdamped": 0.10, "heavy_damped": 0.05, "creep": 0.12, "failed": 0.08,
}
LONG_FPS = [6000.0, 6400.0, 7000.0, 7500.0, 8000.0, 9000.0, 10000.0, 11000.0, 12500.0,
            14000.0, 15000.0, 16000.0, 18000.0, 19000.0]
GROUPS = ["bench-A", "bench-B", "bench-C", "cell-2"]


def sound_speed(T):
    return 331.3 * math.sqrt(1.0 + T / 273.15)


def loguni(rng, lo, hi):
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def pick(rng, table):
    keys = list(table)
    p = np.array([table[k] for k in keys], float)
    return keys[int(rng.choice(len(keys), p=p / p.sum()))]


# ----------------------------------------------------------------------------------------
# release shapes s(u), u in [0, 1]: s(0)=0, s(1)=1, zero slope at both ends
# ----------------------------------------------------------------------------------------
def shape_eval(kind, u, prm):
    u = np.clip(u, 0.0, 1.0)
    if kind == "half_cosine":
        return 0.5 * (1 - np.cos(np.pi * u)), 0.5 * np.pi * np.sin(np.pi * u)
    if kind == "smoothstep":
        return 3 * u ** 2 - 2 * u ** 3, 6 * u * (1 - u)
    if kind in ("beta_fast_start", "beta_slow_start"):
        a, b = prm["a"], prm["b"]
        return betainc(a, b, u), u ** (a - 1) * (1 - u) ** (b - 1) / beta_fn(a, b)
    if kind == "partial_cosine":  # bounce: arrives at the stop with speed
        al = prm["alpha"]
        den = 1 - np.cos(np.pi * al)
        return (1 - np.cos(np.pi * al * u)) / den, np.pi * al * np.sin(np.pi * al * u) / den
    raise ValueError(kind)


def draw_shape(rng):
    kind = pick(rng, {"half_cosine": 0.3, "smoothstep": 0.25, "beta_fast_start": 0.225,
                      "beta_slow_start": 0.225})
    prm = {}
    if kind == "beta_fast_start":
        prm = dict(a=rng.uniform(1.3, 1.8), b=rng.uniform(2.2, 4.0))
    elif kind == "beta_slow_start":
        prm = dict(a=rng.uniform(2.2, 4.0), b=rng.uniform(1.3, 1.8))
    return kind, prm


# ----------------------------------------------------------------------------------------
# damped modes that start at rest at their peak (tau = 0)
# ----------------------------------------------------------------------------------------
def modes_eval(modes, tau):
    """sum over modes of A exp(-lam tau) (cos w tau + lam/w sin w tau); zero velocity at 0."""
    y = np.zeros_like(tau, dtype=float)
    for m in modes:
        w = 2 * np.pi * m["f"]
        lam = -math.log(m["r"]) * m["f"]
        y += m["A"] * np.exp(-lam * tau) * (np.cos(w * tau) + lam / w * np.sin(w * tau))
    return y


def osc_free(y0, v0, f, r, tau):
    w = 2 * np.pi * f
    lam = -math.log(r) * f
    return np.exp(-lam * tau) * (y0 * np.cos(w * tau) + (v0 + lam * y0) / w * np.sin(w * tau))


# ----------------------------------------------------------------------------------------
# loading drift shapes: g(t - onset) in units of the total drift at the release
# ----------------------------------------------------------------------------------------
def loading_eval(L, s):
    """normalised drift (0 at onset, 1 at s = L['T']); s = time since onset (array)."""
    s = np.asarray(s, float)
    T = L["T"]
    sp = np.clip(s, 0, None)
    sh = L["shape"]
    if sh == "linear":
        g = sp / T
    elif sh == "power":
        g = (sp / T) ** L["p"]
    elif sh == "motor":
        g = motor_pos(sp, L) / motor_pos(np.array([T]), L)[0]
    else:
        raise ValueError(sh)
    return np.where(s > 0, g, 0.0)


def motor_speed(sp, L):
    u = np.clip(sp / L["Tr"], 0, 1)
    if L["ramp"] == "raised_cosine":
        return 0.5 * (1 - np.cos(np.pi * u))
    t3 = math.tanh(3.0)
    return (np.tanh(6 * u - 3) + t3) / (2 * t3)


def motor_pos(sp, L):
    # integral of the speed profile, by a fine cumulative trapezoid
    grid = np.linspace(0, max(float(np.max(sp)), L["Tr"]) + 1e-9, 20001)
    v = motor_speed(grid, L)
    pos = np.concatenate([[0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(grid))])
    return np.interp(sp, grid, pos)


# ----------------------------------------------------------------------------------------
# one trial
# ----------------------------------------------------------------------------------------
def draw_trial(camp_name, camp, idx, seed):
    cid = zlib.crc32(camp_name.encode())
    rng = np.random.default_rng([seed, cid, idx])
    long = camp["long"]
    name = f"{camp['prefix']}-{idx + 1:04d}"
    rig = camp["rig"]
    c_sound = sound_speed(rig["air_temperature_c"])
    delay = rig["mic_distance_m"] / c_sound
    off = rig["video_offset_s"]

    family = pick(rng, FAMILY_P_LONG if long else FAMILY_P_MIXED)
    fires = family not in ("failed", "empty")

    # streams
    if long:
        has_audio, has_frames = False, True
    else:
        u = rng.uniform()
        has_audio, has_frames = (False, True) if u < 0.06 else ((True, False) if u < 0.10 else (True, True))

    # frame rate
    if long:
        fps = float(rng.choice(LONG_FPS)) * (1 + rng.uniform(-50e-6, 50e-6))
    else:
        fps = camp["fps"]
    dt_f = 1.0 / fps

    Lrec = rng.uniform(*camp["dur"])
    if long:
        post = rng.uniform(0.3, min(1.5, 0.35 * Lrec))
    else:
        post = rng.uniform(0.12, min(0.30, 0.45 * Lrec))
    pre = Lrec - post  # time from record start to the release

    # -------- noise and the measure
    layout_opts = ({"frame,time_s": 0.5, "time_s": 0.5} if long else
                   {"frame,time_s": 0.35, "time_s": 0.30, "frame": 0.28, "none": 0.07})
    layout = pick(rng, layout_opts)
    if long:
        mname = pick(rng, {"x_px": 0.5, "angle_deg": 0.25, "y_mm": 0.25})
    else:
        mname = pick(rng, {"angle_deg": 0.3, "x_px": 0.3, "brightness": 0.3, "y_mm": 0.1})
    if mname == "brightness":
        decimals = 2
    elif long:
        decimals = int(rng.choice([1, 2])) if mname != "x_px" else 1
    else:
        decimals = int(rng.choice([1, 2, 3]))
    step = 10.0 ** -decimals
    sigma = step * (loguni(rng, 0.5, 3.0) if long else loguni(rng, 0.5, 10.0))
    # the noise a reader sees: Gaussian noise plus the printing quantisation
    sig_eff = math.sqrt(sigma ** 2 + step ** 2 / 12.0)
    if rng.uniform() < 0.15:  # extra weight on the small end, plain to the eye but no single step stands out
        jon = loguni(rng, 10, 20)
    else:
        jon = loguni(rng, 10, 200)
    J = jon * sig_eff * (1 if rng.uniform() < 0.5 else -1)

    # -------- release duration (frames >= 3; some long releases of 15-60 frames)
    Dmin = max(1e-3, 3.0 / fps)
    if rng.uniform() < 0.25:
        nmax = min(60.0, 0.025 * fps)
        D = max(rng.uniform(min(15.0, 0.6 * nmax), nmax) / fps, Dmin)
    else:
        D = loguni(rng, Dmin, 0.025)
    if family == "ring_fast":
        D = max(D, min(0.025, 6.0 / fps))

    # -------- loading
    ltab = {"linear": 0.27, "power": 0.27, "motor": 0.26, "weak": 0.16, "none": 0.04}
    if family in ("failed", "empty"):
        ltab = {"linear": 0.3, "power": 0.3, "motor": 0.3, "weak": 0.1}
    lsh = pick(rng, ltab)
    if family == "empty":
        lsh = "none"
    held_min = max(0.03, 20.0 / fps) if not long else rng.uniform(0.1, 0.4)
    Lp = None
    before_record = False
    if lsh != "none":
        weak = lsh == "weak"
        shape = pick(rng, {"linear": 1, "power": 1, "motor": 1}) if weak else lsh
        Lp = dict(shape=shape, weak=weak)
        if shape == "power":
            Lp["p"] = rng.uniform(1.0, 2.5)
        if shape == "motor":
            Lp["Tr"] = rng.uniform(0.1, 0.5)
            Lp["ramp"] = "raised_cosine" if rng.uniform() < 0.5 else "tanh"
        before_record = rng.uniform() < 0.10
        if before_record:
            Tl = pre + (loguni(rng, 0.01, 1.5) if long else loguni(rng, 0.01, 0.6))
        else:
            Tmax = pre - held_min
            Tlo = 0.2 if long else 0.04
            Tl = loguni(rng, Tlo, min(4.0 if long else 2.0, Tmax)) if Tmax > Tlo else Tmax
        Lp["T"] = Tl
        dsd = rng.uniform(2.0, 8.0) if weak else max(8.0, jon * loguni(rng, 0.05, 1.0))
        sgn = np.sign(J) if rng.uniform() < 0.5 else -np.sign(J)
        Lp["with_jump"] = bool(sgn == np.sign(J))
        Lp["total"] = float(dsd * sig_eff * sgn)

    # -------- release and after
    rel = dict(kind=family)
    osc_truth = None
    if fires:
        def ring_freq(hlo, hhi):
            h = loguni(rng, hlo, hhi)
            f = 1.0 / (2 * D * h)
            return float(np.clip(f, 4.0 / post, fps / 5.0))

        creep = None
        modes = []
        shape_kind, shape_prm = draw_shape(rng)
        if family == "spring":
            shape_kind, shape_prm = "damped_spring", {}
            r = rng.uniform(0.1, 0.5)
            f = 1.0 / (2 * D)
            if f > fps / 5:  # need at least 5 frames a period
                D = 2.5 / fps
                f = 1.0 / (2 * D)
            rel["spring"] = dict(f=f, r=r)
            osc_truth = dict(frequency_hz=f, amplitude_ratio=r)
        elif family == "bounce":
            shape_kind = "partial_cosine"
            shape_prm = dict(alpha=rng.uniform(0.55, 0.85))
            f = ring_freq(0.5, 5.0)
            r = rng.uniform(0.2, 0.9)
            e = rng.uniform(0.3, 0.8)
            b = rng.uniform(0.05, 0.4)
            s1 = shape_eval("partial_cosine", np.array([1.0]), shape_prm)[1][0]
            for _ in range(60):
                y0 = b * abs(J)
                v_hit = (abs(J) + y0) * s1 / D
                v0 = -e * v_hit
                T = 1.0 / f
                tau = np.linspace(0, min(post, 6 * T), 4000)
                y = osc_free(y0, v0, f, r, tau)
                if not np.any(y[5:] >= y0):
                    break
                b *= 1.25
                e *= 0.9
            rel["bounce"] = dict(stop_over_jump=b, restitution=e, f=f, r=r, y0=y0, v0=v0)
            osc_truth = dict(frequency_hz=f, amplitude_ratio=r)
        else:
            after = family
            if family == "creep":
                after = pick(rng, {"ring": 0.5, "overdamped": 0.3, "heavy_damped": 0.2})
                Tc = rng.uniform(0.005, 0.040)
                cfrac = rng.uniform(0.02, 0.10)
                creep = dict(duration_s=Tc, speed_fraction=cfrac)
            rel["after"] = after
            if after == "ring":
                f = ring_freq(1.0, 6.0)
                modes = [dict(A=rng.uniform(0.01, 0.6) * abs(J), f=f, r=rng.uniform(0.2, 0.9))]
            elif after == "ring_fast":
                hlo = max(0.25, 2.5 / (fps * D))
                h = rng.uniform(hlo, max(hlo + 0.05, 0.85))
                f = 1.0 / (2 * D * h)
                modes = [dict(A=rng.uniform(0.15, 0.6) * abs(J), f=f, r=rng.uniform(0.2, 0.9))]
            elif after == "two_mode":
                f1 = ring_freq(1.0, 5.0)
                f2 = min(f1 * rng.uniform(3.0, 8.0), fps / 5.0)
                if f2 < 1.8 * f1:
                    f1 = f2 / 3.0
                A1 = rng.uniform(0.1, 0.6) * abs(J)
                modes = [dict(A=A1, f=f1, r=rng.uniform(0.3, 0.9)),
                         dict(A=A1 * rng.uniform(0.15, 0.5), f=f2, r=rng.uniform(0.2, 0.8))]
            elif after == "heavy_damped":
                f = ring_freq(1.0, 4.0)
                modes = [dict(A=rng.uniform(0.01, 0.03) * abs(J), f=f, r=rng.uniform(0.02, 0.15))]
            elif after == "overdamped":
                modes = []
            if modes:
                osc_truth = dict(frequency_hz=modes[0]["f"], amplitude_ratio=modes[0]["r"])
        rel["shape"] = shape_kind
        rel["shape_prm"] = shape_prm
        rel["modes"] = modes
        rel["creep"] = creep
    else:
        if family == "failed":
            rel["relax_tau"] = rng.uniform(0.02, 0.2)

    # -------- time placement of the record
    t0 = 0.0
    if layout in ("frame,time_s", "time_s") and rng.uniform() < (0.08 if not long else 0.05):
        t0 = -rng.uniform(0.05, 0.3)
        # keep the click inside the audio file
        if has_audio:
            t0 = max(t0, 0.08 - off - delay - pre)
            t0 = min(t0, 0.0)
    n_frames = int(round(Lrec * fps))
    k = np.arange(n_frames)
    t = t0 + k * dt_f
    tr = t0 + pre + rng.uniform(0, dt_f)  # release at an arbitrary sub-frame phase
    return build(camp_name, camp, name, rng, dict(locals()))


def build(camp_name, camp, name, rng, v):
    fps, t, tr, D, J, sigma, family = v["fps"], v["t"], v["tr"], v["D"], v["J"], v["sigma"], v["family"]
    se = v["sig_eff"]
    Lp, rel, post = v["Lp"], v["rel"], v["post"]
    fires = v["fires"]
    sgnJ = 1.0 if J > 0 else -1.0
    aJ = abs(J)
    truth = dict(trial=name, campaign=camp_name, family=family)

    # ----- loading drift
    x_load = np.zeros_like(t)
    onset = None
    leaves = None
    if Lp is not None:
        onset = tr - Lp["T"]
        if family == "failed":
            tf = tr
            g = loading_eval(Lp, np.minimum(t, tf) - onset)
            relax = np.where(t > tf, np.exp(-(t - tf) / rel["relax_tau"]), 1.0)
            x_load = Lp["total"] * g * relax
        else:
            x_load = Lp["total"] * loading_eval(Lp, np.minimum(t, tr) - onset)
        # where the noise-free drift first exceeds 2 noise SD
        fine = np.linspace(onset, tr, 200001)
        gf = np.abs(Lp["total"] * loading_eval(Lp, fine - onset))
        above = np.nonzero(gf > 2 * se)[0]
        leaves = float(fine[above[0]]) if above.size else None

    # ----- release, creep, after-release
    x_rel = np.zeros_like(t)
    creep_truth = None
    peak_t = None
    fast_end = None
    ring_dev = None  # function tau -> ringing deviation about the new rest level (sign-normalised)
    if fires:
        shape = rel["shape"]
        if shape == "damped_spring":
            f, r = rel["spring"]["f"], rel["spring"]["r"]
            tau = t - tr
            y = aJ * (1 - modes_eval([dict(A=1.0, f=f, r=r)], np.clip(tau, 0, None)))
            x_rel = sgnJ * np.where(tau > 0, y, 0.0)
            peak_t = tr + D
            fast_end = tr + D
            ring_dev = lambda tau_: -aJ * modes_eval([dict(A=1.0, f=f, r=r)], tau_)  # noqa
            A_peak = aJ * math.sqrt(r)
        elif shape == "partial_cosine":
            B = rel["bounce"]
            M = aJ + B["y0"]
            tau = t - tr
            u = tau / D
            s, _ = shape_eval(shape, u, rel["shape_prm"])
            pa = np.clip(tau - D, 0, None)
            ypost = aJ + osc_free(B["y0"], B["v0"], B["f"], B["r"], pa)
            y = np.where(tau <= 0, 0.0, np.where(tau < D, M * s, ypost))
            x_rel = sgnJ * y
            peak_t = tr + D
            fast_end = tr + D
            ring_dev = lambda tau_: osc_free(B["y0"], B["v0"], B["f"], B["r"], tau_)  # noqa
            A_peak = B["y0"]
        else:
            modes = rel["modes"]
            A_peak = sum(m["A"] for m in modes)
            M = aJ + A_peak
            cr = rel["creep"]
            Tc = cr["duration_s"] if cr else 0.0
            cf = cr["speed_fraction"] if cr else 0.0
            # fine grid over creep + snap: velocity, then position
            ng = 40001
            grid = np.linspace(tr - Tc, tr + D, ng)
            ug = (grid - tr) / D
            sg, dsg = shape_eval(shape, ug, rel["shape_prm"])
            dmax = float(np.max(shape_eval(shape, np.linspace(0, 1, 20001), rel["shape_prm"])[1]))
            # creep speed profile (per unit of c*Vpk): rises as w^2 over Tc, then fades as (1-s)
            if Tc > 0:
                w = np.clip((grid - (tr - Tc)) / Tc, 0, 1)
                gc = np.where(grid < tr, w ** 2, 1 - sg)
            else:
                gc = np.zeros_like(grid)
            Gint = np.concatenate([[0], np.cumsum(0.5 * (gc[1:] + gc[:-1]) * np.diff(grid))])
            # M = Jsnap + cf * (Jsnap*dmax/D) * Gint[-1]
            Jsnap = M / (1 + cf * dmax / D * Gint[-1])
            Vpk_snap = Jsnap * dmax / D
            vel = Jsnap * np.where((grid >= tr), dsg, 0.0) / D + cf * Vpk_snap * gc
            pos = Jsnap * np.where(grid >= tr, sg, 0.0) + cf * Vpk_snap * Gint
            tau = t - tr
            post_y = aJ + modes_eval(modes, np.clip(tau - D, 0, None))
            y = np.where(t < tr - Tc, 0.0, np.where(t <= tr + D, np.interp(t, grid, pos), post_y))
            x_rel = sgnJ * y
            fast_end = tr + D
            peak_t = tr + D if A_peak > 0 else None
            if modes:
                ring_dev = lambda tau_: modes_eval(modes, tau_)  # noqa
            if cr:
                vpk = float(np.max(vel))
                ct = {}
                for q in (0.05, 0.10, 0.20, 0.50):
                    i = int(np.argmax(vel > q * vpk))
                    ct[f"speed_{int(q * 100)}pct_s"] = float(grid[i])
                creep_truth = dict(duration_ms=Tc * 1e3, peak_speed_fraction=cf, start_s=float(tr - Tc),
                                   snap_start_s=float(tr), **ct)
        truth["overshoot_over_jump"] = A_peak / aJ

    # ----- noise, wander
    nfr = len(t)
    noise = rng.normal(0, sigma, nfr)
    wander = np.zeros(nfr)
    wander_sd = 0.0
    if rng.uniform() < 0.25:
        rw = np.cumsum(rng.normal(0, 1, nfr))
        win = max(3, int(0.05 * fps))
        rw = np.convolve(rw, np.ones(win) / win, mode="same")
        rw -= rw.mean()
        wander_sd = rng.uniform(0.3, 1.2)
        wander = rw / (rw.std() + 1e-12) * wander_sd * se
    x_clean = x_load + x_rel
    if v["mname"] == "brightness":
        span_lo, span_hi = float(np.min(x_clean)), float(np.max(x_clean))
        base = rng.uniform(20 - span_lo, 235 - span_hi) if span_hi - span_lo < 210 else 20 - span_lo
    elif v["mname"] == "angle_deg":
        base = rng.uniform(-60, 60)
    elif v["mname"] == "x_px":
        base = rng.uniform(50, 900)
    else:
        base = rng.uniform(-20, 20)
    meas = base + x_clean + wander + noise
    if v["mname"] == "brightness":
        meas = np.clip(meas, 0, 255)

    # ----- dropped frames (never inside the release or its 10 frames either side)
    keep = np.ones(nfr, bool)
    missing = 0
    layout = v["layout"]
    tsfmt = "none"
    digits = None
    if layout in ("frame,time_s", "time_s"):
        if v["long"]:
            tsfmt = pick(rng, {"sig4": 0.3, "sig5": 0.35, "sig6": 0.35})
        else:
            tsfmt = pick(rng, {"exact7": 0.45, "sig6": 0.2, "sig5": 0.2, "sig4": 0.15})
        if tsfmt.startswith("sig"):
            digits = int(tsfmt[3:])
    gaps_ok = layout in ("frame,time_s", "frame")
    if layout == "time_s":
        if tsfmt == "exact7":
            gaps_ok = True
        else:
            tmax = max(abs(t[0]), abs(t[-1]))
            res = 10.0 ** (math.floor(math.log10(tmax)) - digits + 1)
            gaps_ok = res <= 0.25 / fps
    if (not v["long"]) and gaps_ok and rng.uniform() < 0.12:
        nmiss = int(rng.integers(1, 4))
        forbid = np.zeros(nfr, bool)
        forbid[:5] = True
        forbid[-5:] = True
        if fires:
            a = int(math.floor((tr - t[0]) * fps)) - 10
            b = int(math.ceil((tr + D - t[0]) * fps)) + 10
            if rel.get("creep"):
                a -= int(math.ceil(rel["creep"]["duration_s"] * fps))
            forbid[max(0, a):min(nfr, b + 1)] = True
        cand = np.nonzero(~forbid)[0]
        if rng.uniform() < 0.5:
            st = int(rng.choice(cand[:-3]))
            sel = [st + j for j in range(nmiss) if st + j < nfr and not forbid[st + j]]
        else:
            sel = list(rng.choice(cand, size=nmiss, replace=False))
        keep[sel] = False
        missing = int((~keep).sum())

    # ----- write frames
    frames_text = None
    if v["has_frames"]:
        kk = v["k"][keep]
        tt = t[keep]
        mm = meas[keep]
        fr_idx = kk + int(round(t[0] * fps))
        mcol = [f"{x:.{v['decimals']}f}" for x in mm]
        if tsfmt == "exact7":
            tcol = [f"{x:.7f}" for x in tt]
        elif digits:
            a_ = np.abs(tt)
            mag = np.floor(np.log10(np.where(a_ > 0, a_, 1.0)))
            q = 10.0 ** (mag - digits + 1)
            rr = np.round(tt / q) * q + 0.0
            dec = np.maximum(0, digits - 1 - mag).astype(int)
            tcol = [f"{x:.{d}f}" for x, d in zip(rr, dec)]
        else:
            tcol = None
        cols = []
        hdr = []
        if layout in ("frame,time_s", "frame"):
            hdr.append("frame")
            cols.append([str(int(i)) for i in fr_idx])
        if tcol is not None:
            hdr.append("time_s")
            cols.append(tcol)
        hdr.append(v["mname"])
        cols.append(mcol)
        lines = [",".join(hdr)] + [",".join(row) for row in zip(*cols)]
        frames_text = "\n".join(lines) + "\n"

    # ----- truth (video part)
    truth.update(
        fps=fps, n_frames=int(keep.sum()), first_frame_time_s=float(t[0]),
        frames_layout=layout if v["has_frames"] else None, measure=v["mname"],
        measure_decimals=v["decimals"], noise_sd=se, noise_sd_gaussian=sigma, wander_sd_over_noise=wander_sd,
        timestamp_format=tsfmt, timestamp_digits=digits, missing_frames=missing,
        has_audio=v["has_audio"], has_frames=v["has_frames"],
        jump=J if fires else None, jump_over_noise=abs(J) / se if fires else None,
        release_shape=rel.get("shape"), release_shape_params=rel.get("shape_prm"),
        after_release=rel.get("after", family if fires else None),
    )
    truth["loading_shape"] = None
    if Lp is not None:
        truth["loading_shape"] = ("weak_" if Lp["weak"] else "") + Lp["shape"]
        truth["loading_params"] = {k_: Lp[k_] for k_ in ("p", "Tr", "ramp", "with_jump") if k_ in Lp}
    truth["loading_before_record"] = bool(v["before_record"])
    truth["loading_onset_true_s"] = onset
    truth["loading_onset_s"] = None if (onset is None or v["before_record"]) else onset
    truth["loading_leaves_held_s"] = leaves
    truth["drift_total_sd"] = abs(Lp["total"]) / se if Lp else 0.0
    truth["latch_release_s"] = tr if fires else None
    truth["creep"] = creep_truth
    truth["motion_peak_s"] = peak_t
    truth["fast_phase_end_s"] = fast_end
    truth["release_ms"] = (fast_end - tr) * 1e3 if fires else None
    lms = (tr - onset) * 1e3 if (fires and onset is not None) else None
    truth["loading_ms_true"] = lms
    truth["loading_ms"] = None if v["before_record"] else lms
    truth["oscillation"] = v["osc_truth"]
    eff = v["osc_truth"]["amplitude_ratio"] ** 2 if v["osc_truth"] else None
    truth["efficiency"] = eff
    truth["amplification"] = (truth["loading_ms"] / truth["release_ms"] * eff
                              if (truth["loading_ms"] is not None and eff is not None) else None)
    if family == "failed":
        truth["relax_start_s"] = tr
        truth["relax_tau_ms"] = rel["relax_tau"] * 1e3
    if v["osc_truth"]:
        f = v["osc_truth"]["frequency_hz"]
        truth["ringing_half_period_over_release"] = (0.5 / f) / D
        T = 1.0 / f
        ncyc = int(min(200, post / T))
        cc = 0
        for c_ in range(ncyc):
            tau_ = np.linspace(c_ * T, (c_ + 1) * T, 400)
            yv = ring_dev(tau_)
            if yv.max() - yv.min() > 3 * se:
                cc += 1
            else:
                break
        truth["clear_cycles"] = cc
        if rel.get("modes") and len(rel["modes"]) > 1:
            truth["second_mode"] = dict(frequency_hz=rel["modes"][1]["f"],
                                        amplitude_ratio=rel["modes"][1]["r"],
                                        amplitude_over_first=rel["modes"][1]["A"] / rel["modes"][0]["A"])
    else:
        truth["ringing_half_period_over_release"] = None
        truth["clear_cycles"] = 0
    return truth, frames_text, v


# ----------------------------------------------------------------------------------------
# audio
# ----------------------------------------------------------------------------------------
def draw_click(rng, sr, broad=True):
    nyq_lim = min(40000.0, 0.45 * sr)
    nm = int(rng.integers(1, 5))
    modes = []
    for _ in range(nm):
        modes.append(dict(f=loguni(rng, 2000.0, nyq_lim), tau=loguni(rng, 0.2e-3, 5e-3),
                          a=rng.uniform(0.3, 1.0), ph=rng.uniform(0, 2 * np.pi)))
    if broad and rng.uniform() < 0.6:  # short broadband impact at the start
        for _ in range(8):
            modes.append(dict(f=rng.uniform(2000.0, nyq_lim), tau=loguni(rng, 30e-6, 150e-6),
                              a=rng.uniform(0.2, 0.8), ph=rng.uniform(0, 2 * np.pi)))
    return dict(modes=modes, attack=rng.uniform(10e-6, 50e-6))


def click_samples(c, sr, onset, n_total):
    """returns (i0, waveform) with waveform samples for indices i0.. (zero before onset)."""
    tmax = 10 * max(m["tau"] for m in c["modes"]) + 1e-3
    i0 = int(math.ceil(onset * sr))
    i1 = min(n_total, int(math.ceil((onset + tmax) * sr)))
    if i1 <= i0:
        return i0, np.zeros(0)
    tau = np.arange(i0, i1) / sr - onset
    y = np.zeros_like(tau)
    for m in c["modes"]:
        y += m["a"] * np.exp(-tau / m["tau"]) * np.sin(2 * np.pi * m["f"] * tau + m["ph"])
    Ta = c["attack"]
    env = np.where(tau < Ta, 0.5 * (1 - np.cos(np.pi * np.clip(tau, 0, None) / Ta)), 1.0)
    return i0, y * env


def place(x, i0, w, gain):
    n = min(len(w), len(x) - i0)
    if n > 0 and i0 >= 0:
        x[i0:i0 + n] += gain * w[:n]


def make_audio(rng, camp, v, truth):
    sr = camp["sr"]
    rig = camp["rig"]
    delay = rig["mic_distance_m"] / sound_speed(rig["air_temperature_c"])
    off = rig["video_offset_s"]
    fires = v["fires"]
    family = v["family"]
    t_video_end = float(v["t"][-1])
    dur = t_video_end + off + delay + rng.uniform(0.0, 0.03)
    kind = "normal"
    if family in ("failed", "empty"):
        kind = family
    else:
        opts = {"normal": 0.62, "double_click": 0.14, "clipped": 0.08, "out_of_sync": 0.12}
        if not v["has_frames"]:
            opts.pop("out_of_sync")
        kind = pick(rng, opts)
    shift = 0.0
    if kind == "out_of_sync":
        shift = rng.uniform(0.005, 0.020) * (1 if rng.uniform() < 0.5 else -1)
    ta = v["tr"] + off + delay + shift if fires else None
    gap = None
    if kind == "double_click":
        dsel = rng.uniform()
        gap = rng.uniform(0.5e-3, 3e-3) if dsel < 0.4 else (
            rng.uniform(3e-3, 15e-3) if dsel < 0.7 else rng.uniform(15e-3, 60e-3))
    if ta is not None:
        dur = max(dur, ta + (gap or 0.0) + 0.06)
    n = int(round(dur * sr))

    # level plan: SNR of the main click, noise floor
    snr = rng.uniform(10, 50) if kind != "double_click" else rng.uniform(16, 50)
    rel_db = rng.uniform(-10, 6) if kind == "double_click" else None
    loudest = snr + max(0.0, rel_db or 0.0)
    # keep the loudest click below -1 dBFS (two overlapping clicks may add: 6 dB more room)
    hi = min(-40.0, -1.0 - loudest - (6.0 if kind == "double_click" else 0.0))
    noise_db = rng.uniform(-70, hi) if kind != "clipped" else rng.uniform(-70, -40)
    nrms = 10 ** (noise_db / 20)
    x = rng.normal(0, nrms, n)
    tt = np.arange(n) / sr
    extras = {}
    if rng.uniform() < 0.3:  # mains hum
        f0 = 50.0 if rng.uniform() < 0.5 else 60.0
        amp = nrms * 10 ** (rng.uniform(0, 20) / 20)
        for h in range(1, 8):
            a = amp if h == 1 else amp * 10 ** (-rng.uniform(6, 30) / 20)
            x += a * np.sin(2 * np.pi * h * f0 * tt + rng.uniform(0, 2 * np.pi))
        extras["hum_hz"] = f0
    thumps = []
    if rng.uniform() < 0.2:
        for _ in range(int(rng.integers(1, 3))):
            for _try in range(20):
                tth = rng.uniform(0.0, max(0.01, dur - 0.09))
                if ta is None or not (ta - 0.035 < tth + 0.08 and tth < ta + 0.01):
                    break
            else:
                continue
            f = rng.uniform(40, 150)
            d = rng.uniform(0.02, 0.08)
            Tat = rng.uniform(1e-3, 10e-3)
            i0 = int(math.ceil(tth * sr))
            i1 = min(n, int((tth + d) * sr))
            tau = np.arange(i0, i1) / sr - tth
            env = np.where(tau < Tat, 0.5 * (1 - np.cos(np.pi * tau / Tat)), 1.0)
            # smooth decay and a raised-cosine taper over the last 30 %: no sharp edge anywhere
            taper = np.where(tau > 0.7 * d, 0.5 * (1 + np.cos(np.pi * np.clip((tau - 0.7 * d) / (0.3 * d), 0, 1))), 1.0)
            env *= np.exp(-tau / (d / 3)) * taper
            a = nrms * 10 ** (rng.uniform(10, 40) / 20)
            x[i0:i1] += a * env * np.sin(2 * np.pi * f * tau)
            thumps.append(float(tth))

    clicks = []
    click_snr = None
    second_snr = None
    ticks = []
    clip_peak = None
    if fires:
        c1 = draw_click(rng, sr)
        i0, w1 = click_samples(c1, sr, ta, n)
        pk = np.max(np.abs(w1))
        if kind == "clipped":
            clip_peak = rng.uniform(1.3, 5.0)
            g1 = clip_peak / pk
            click_snr = 20 * math.log10(clip_peak / nrms)
        else:
            g1 = nrms * 10 ** (snr / 20) / pk
            click_snr = snr
        place(x, i0, w1, g1)
        clicks.append(ta)
        if kind == "double_click":
            t2 = ta + gap
            c2 = draw_click(rng, sr)
            j0, w2 = click_samples(c2, sr, t2, n)
            second_snr = snr + rel_db
            place(x, j0, w2, nrms * 10 ** (second_snr / 20) / np.max(np.abs(w2)))
            clicks.append(t2)
            extras["second_click_gap_ms"] = gap * 1e3
            extras["second_click_rel_db"] = rel_db
        # a faint tick when the latch was set, 50-300 ms before the release
        tick_hi = min(15.0, click_snr - 13.0)
        if tick_hi >= 6.0 and rng.uniform() < 0.3:
            tk = ta - rng.uniform(0.05, 0.3)
            if tk > 0.025:
                ticks.append((tk, rng.uniform(6.0, tick_hi)))
    elif family == "failed" and rng.uniform() < 0.5:
        # tick when the latch is set, somewhere before the slip
        tk = rng.uniform(0.03, max(0.031, min(dur - 0.02, v["tr"] + off + delay)))
        ticks.append((tk, rng.uniform(6.0, 15.0)))
    tick_out = []
    for tk, tsnr in ticks:
        c = dict(modes=[dict(f=loguni(rng, 3000, min(15000, 0.45 * sr)), tau=loguni(rng, 0.1e-3, 0.5e-3),
                             a=1.0, ph=rng.uniform(0, 2 * np.pi))], attack=rng.uniform(10e-6, 50e-6))
        j0, w = click_samples(c, sr, tk, n)
        place(x, j0, w, nrms * 10 ** (tsnr / 20) / np.max(np.abs(w)))
        tick_out.append(dict(t_s=float(tk), snr_db=float(tsnr)))

    x = np.clip(x, -1.0, 1.0)
    stereo = rng.uniform() < 0.2
    if stereo:
        g = rng.uniform(0.3, 0.7)
        x2 = g * x + rng.normal(0, nrms * rng.uniform(0.5, 1.5), len(x))
        data = np.stack([x, np.clip(x2, -1, 1)], axis=1)
    else:
        data = x
    audio = dict(sr=sr, subtype=camp["subtype"], data=data)
    truth.update(
        kind=kind, audio_sample_rate_hz=sr, audio_channels=2 if stereo else 1,
        audio_duration_s=len(x) / sr, noise_dbfs_rms=noise_db,
        click_onset_s=clicks[0] if clicks else None, clicks_s=clicks,
        click_snr_db=click_snr, second_click_snr_db=second_snr, clip_peak_over_fs=clip_peak,
        sync_shift_ms=shift * 1e3, acoustic_delay_ms=delay * 1e3, ticks=tick_out, thumps_s=thumps,
        **extras,
    )
    return audio, kind


def expected_flags(truth):
    fl = []
    fires = truth["latch_release_s"] is not None
    if truth["has_audio"]:
        if not fires:
            fl.append("no_click")
        if truth["kind"] == "double_click":
            s2 = truth["second_click_snr_db"]
            strongest = max(truth["click_snr_db"], s2)
            if s2 >= 10.0 and s2 >= strongest - 12.0 and truth["click_snr_db"] >= strongest - 12.0:
                fl.append("double_click")
        if truth["kind"] == "clipped":
            fl.append("clipped")
        if truth["kind"] == "out_of_sync" and truth["has_frames"]:
            fl.append("sync_mismatch")
    if truth["has_frames"]:
        if not fires:
            fl.append("no_release")
        if truth["loading_shape"] is None and truth["family"] != "failed":
            fl.append("no_loading")
        if truth["missing_frames"] > 0:
            fl.append("frame_gaps")
    return fl


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--campaign", required=True, choices=sorted(CAMPAIGNS))
    ap.add_argument("--out", required=True)
    ap.add_argument("--count", type=int, default=None)
    ap.add_argument("--seed", type=int, default=1)
    a = ap.parse_args()
    camp = CAMPAIGNS[a.campaign]
    count = a.count if a.count is not None else camp["count"]
    os.makedirs(a.out, exist_ok=True)
    rows = []
    for i in range(count):
        truth, frames_text, v = draw_trial(a.campaign, camp, i, a.seed)
        name = truth["trial"]
        rng_a = np.random.default_rng([a.seed, zlib.crc32(a.campaign.encode()), i, 7])
        audio_rel = ""
        if v["has_audio"]:
            audio, kind = make_audio(rng_a, camp, v, truth)
            audio_rel = f"{name}.wav"
            sf.write(os.path.join(a.out, audio_rel), audio["data"], audio["sr"], subtype=audio["subtype"])
        else:
            truth.update(kind=v["family"] if v["family"] in ("failed", "empty") else "normal",
                         click_onset_s=None, clicks_s=[], click_snr_db=None, second_click_snr_db=None)
        frames_rel = ""
        if frames_text is not None:
            frames_rel = f"{name}.frames.csv"
            with open(os.path.join(a.out, frames_rel), "w") as fh:
                fh.write(frames_text)
        truth["flags"] = expected_flags(truth)
        group = GROUPS[int(np.random.default_rng([a.seed, i, 3]).integers(len(GROUPS)))]
        truth["group"] = group
        with open(os.path.join(a.out, f"{name}.truth.json"), "w") as fh:
            json.dump(truth, fh, indent=1, default=float)
        rows.append(f"{name},{audio_rel},{frames_rel},{group}")
    with open(os.path.join(a.out, "manifest.csv"), "w") as fh:
        fh.write("trial,audio,frames,group\n" + "\n".join(rows) + "\n")
    # fps only where the campaign has one frame rate (frame CSVs without time_s need it);
    # long-tracked trials all carry time_s and each has its own rate
    rig = ({"fps": camp["fps"]} if camp["fps"] else {}) | dict(camp["rig"])
    with open(os.path.join(a.out, "rig.json"), "w") as fh:
        json.dump(rig, fh, indent=2)
    print(f"{a.campaign}: wrote {count} trials to {a.out}", file=sys.stderr)


if __name__ == "__main__":
    main()
