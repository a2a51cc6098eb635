"""Stability margins of a loop: gain margins (upper and lower), phase and delay margin,
peak sensitivity, and closed-loop stability.

Definitions (L the loop transfer for negative feedback, see bench.tuning.loop):
- The closed loop stays stable for gain factors k in (gain_margin_lower, gain_margin_upper)
  around 1. The ends are the critical gains 1/|L(jω)| where L crosses the negative real
  axis (ω = 0 and ω = ∞, or the Nyquist frequency of a discrete loop, included): the
  nearest one above 1 and the nearest one below 1. ``None`` when there is none (an
  open-loop-stable loop usually has no lower margin; a loop with no phase crossover has
  no upper one). For an unstable closed loop both are None.
- Phase margin: 180° + arg L at the gain crossover(s) |L| = 1; the smallest one is
  reported with its crossover frequency. Delay margin: the smallest extra dead time that
  destabilises, min over crossovers of (phase margin in rad)/ω_c.
- ms: max over ω of |1/(1 + L)|. dB figures are 20·log10 of the ratios.
- Stability: closed-loop poles where exact (discrete loops: roots of den + num in z, the
  plant's dead time being whole and fractional sample shifts; continuous loops without
  dead time: roots in s). Continuous loops with dead time: Nyquist count, the winding of
  1 + L along s = σ0 + jω (σ0 a small positive shift that keeps poles at s = 0 on the
  left), Z = P − winding, P the open-loop poles right of the contour.

Public API: Margins, margins, loop_margins; re-exported from bench.tuning.loop for
convenience: LoopController, PlantModel, LoopTransfer, loop_transfer, state_feedback_loop,
simulate_disturbance, DisturbanceResponse.

Must not import: bench.link, bench.ui, bench.rig, serial, textual, control.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from .loop import (DisturbanceResponse, LoopController, LoopTransfer, PlantModel,
                   loop_transfer, simulate_disturbance, state_feedback_loop)

__all__ = ["Margins", "margins", "loop_margins", "simulate_disturbance", "DisturbanceResponse",
           "LoopController", "PlantModel", "LoopTransfer", "loop_transfer",
           "state_feedback_loop"]


@dataclass(frozen=True)
class Margins:
    stable: bool
    gain_margin_upper: float | None       # ratio (> 1), None = unlimited
    gain_margin_upper_db: float | None
    gain_margin_lower: float | None       # ratio (< 1), None = none
    gain_margin_lower_db: float | None
    phase_margin_deg: float | None
    crossover_rad_s: float | None
    delay_margin_s: float | None
    ms: float
    ms_db: float
    phase_crossover_rad_s: float | None   # where the upper gain margin is read
    method: str                           # how stability was decided


def _db(x):
    return None if x is None else float(20.0 * math.log10(x))


def margins(controller: LoopController, plant) -> Margins:
    """Margins of a PID controller (continuous or discrete) around a plant model."""
    return loop_margins(loop_transfer(controller, plant))


def _scale(loop: LoopTransfer) -> tuple[float, float]:
    if loop.h_s is not None:
        nyq = math.pi / loop.h_s
        return nyq * 1e-6, nyq
    roots = np.r_[np.roots(loop.num), np.roots(loop.den)]
    mags = np.abs(roots[np.abs(roots) > 1e-12])
    if loop.delay_s > 0:
        mags = np.r_[mags, 1.0 / loop.delay_s]
    if len(mags) == 0:
        mags = np.array([1.0])
    lo, hi = float(mags.min()) * 1e-4, float(mags.max()) * 1e4

    def mag(w):
        return float(np.abs(loop.response(np.array([w]))[0]))

    for _ in range(8):  # |L| still large at the top: the crossover lies higher
        if mag(hi) <= 0.1:
            break
        hi *= 10.0
    for _ in range(8):  # |L| small but rising to the left (integrators): look lower
        if mag(lo) >= 10.0 or mag(lo / 10.0) <= 1.5 * mag(lo):
            break
        lo /= 10.0
    return lo, hi


def _grid(loop: LoopTransfer, lo: float, hi: float, per_decade: int = 200) -> np.ndarray:
    n = int(per_decade * math.log10(hi / lo)) + 2
    w = np.geomspace(lo, hi, n)
    # refine where the phase turns fast (dead time at high frequency) and |L| still matters
    for _ in range(12):
        lv = loop.response(w)
        dph = np.abs(np.angle(lv[1:] / lv[:-1]))
        big = (dph > 0.2) & (np.maximum(np.abs(lv[1:]), np.abs(lv[:-1])) > 1e-3)
        if not big.any():
            break
        w = np.sort(np.r_[w, 0.5 * (w[1:] + w[:-1])[big]])
    return w


def _roots_stable(loop: LoopTransfer) -> bool:
    poles = np.roots(np.polyadd(loop.den, loop.num))
    if loop.h_s is not None:
        return bool(np.all(np.abs(poles) < 1.0 - 1e-10))
    return bool(np.all(poles.real < -1e-10 * max(1.0, np.max(np.abs(poles), initial=1.0))))


def _nyquist_stable(loop: LoopTransfer, w_lo: float, w_hi: float) -> bool:
    sigma = w_lo * 1e-2
    p = int(np.sum(np.roots(loop.den).real > sigma))

    def f(w):
        s = sigma + 1j * w
        return 1.0 + np.polyval(loop.num, s) / np.polyval(loop.den, s) * np.exp(-s * loop.delay_s)

    w = np.r_[0.0, np.geomspace(sigma * 1e-3, w_hi * 10, 4000)]
    for _ in range(20):
        fv = f(w)
        step = np.abs(np.angle(fv[1:] / fv[:-1]))
        big = step > 0.3
        if not big.any():
            break
        w = np.sort(np.r_[w, 0.5 * (w[1:] + w[:-1])[big]])
    fv = f(w)
    turn = np.sum(np.angle(fv[1:] / fv[:-1]))  # ω from 0 to ∞; the mirror half doubles it
    winding = 2.0 * turn / (2.0 * math.pi)
    return round(p - winding) == 0


def _crossings(fun, w: np.ndarray, vals: np.ndarray) -> list[float]:
    idx = np.flatnonzero(np.sign(vals[1:]) * np.sign(vals[:-1]) < 0)
    out = []
    for i in idx:
        try:
            out.append(brentq(fun, w[i], w[i + 1], xtol=1e-12 * w[i], maxiter=200))
        except ValueError:
            pass
    out += list(w[np.flatnonzero(vals == 0)])
    return out


def loop_margins(loop: LoopTransfer) -> Margins:
    """Margins of a loop transfer (see the module docstring for definitions)."""
    lo, hi = _scale(loop)
    w = _grid(loop, lo, hi)
    lv = loop.response(w)

    def one(x):
        return complex(loop.response(np.array([x]))[0])

    # gain crossovers |L| = 1
    logmag = np.log(np.abs(lv))
    wc = _crossings(lambda x: math.log(abs(one(x))), w, logmag)
    # phase margin 180° + arg L ≡ arg(−L), taken in (−180°, 180°]
    pms = [(math.degrees(math.atan2(-one(x).imag, -one(x).real)), x) for x in wc]
    # negative-real-axis crossings: Im L changes sign with Re L < 0
    sinph = lv.imag / np.abs(lv)
    crit = []
    for x in _crossings(lambda x: one(x).imag / abs(one(x)), w, sinph):
        v = one(x)
        if v.real < 0:
            crit.append((1.0 / abs(v), x))
    # the ends: ω = 0, and ω = ∞ (continuous) or the Nyquist frequency (discrete)
    if loop.h_s is None:
        if abs(loop.den[-1]) > 0:
            l0 = loop.num[-1] / loop.den[-1]
            if l0 < 0:
                crit.append((1.0 / abs(l0), 0.0))
        if len(loop.num) == len(loop.den) and loop.num[0] != 0:
            linf = loop.num[0] / loop.den[0]
            if linf < 0 or loop.delay_s > 0:
                crit.append((1.0 / abs(linf), math.inf))
    else:
        for z, wz in ((1.0, 0.0), (-1.0, math.pi / loop.h_s)):
            dz = np.polyval(loop.den, z)
            if abs(dz) > 1e-12 * np.sum(np.abs(loop.den)):
                lz = np.polyval(loop.num, z) / dz
                if lz < 0:
                    crit.append((1.0 / abs(lz), wz))

    if loop.h_s is None and loop.delay_s > 0:
        stable, method = _nyquist_stable(loop, lo, hi), "Nyquist count (dead time)"
    else:
        stable, method = _roots_stable(loop), "closed-loop poles"

    # peak sensitivity, refined around the grid's minimum of |1 + L|
    dist = np.abs(1.0 + lv)
    i = int(np.argmin(dist))
    a, b = w[max(i - 1, 0)], w[min(i + 1, len(w) - 1)]
    best = dist[i]
    if b > a:
        res = minimize_scalar(lambda x: abs(1.0 + one(x)), bounds=(a, b), method="bounded",
                              options={"xatol": 1e-10 * b})
        best = min(best, res.fun)
    ms = 1.0 / best if best > 0 else math.inf

    upper = lower = w_pc = None
    if stable:
        above = [(k, x) for k, x in crit if k > 1.0]
        below = [k for k, _ in crit if k < 1.0]
        if above:
            upper, w_pc = min(above)
        if below:
            lower = max(below)
    pm = wgc = dm = None
    if pms:
        pm, wgc = min(pms)
        if stable:
            dms = [math.radians(p % 360.0) / x for p, x in pms if x > 0]
            dm = min(dms) if dms else None
    def f(x):
        return None if x is None else float(x)

    ms = float(ms)
    return Margins(bool(stable), f(upper), _db(upper), f(lower), _db(lower), f(pm), f(wgc),
                   f(dm), ms, 20.0 * math.log10(ms) if math.isfinite(ms) else math.inf,
                   f(w_pc), method)
