"""Stability margins of a loop: gain margins (upper and lower), phase and delay margin,
peak sensitivity, and closed-loop stability.

Definitions (L the loop transfer for negative feedback, see rigbench.tuning.loop):
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
- Stability: closed-loop poles where exact and cheap (discrete loops of degree up to
  ``ROOTS_MAX_DEGREE``: roots of den + num in z, the plant's dead time being whole and
  fractional sample shifts; continuous loops without dead time: roots in s). Otherwise a
  Nyquist count, Z = P − winding, P the open-loop poles outside the contour: continuous
  loops with dead time wind 1 + L along s = σ0 + jω (σ0 a small positive shift that keeps
  poles at s = 0 on the left); discrete loops of high degree (a long dead time makes
  L = R(z)·z^−k with k in the hundreds) along z = ρ·e^{jθ}, ρ = e^{σ0·h} just outside the
  unit circle.

How it is computed (fast with long dead times): L is split into a rational part R and a
pure delay, L(jω) = R(jω)·e^{−jωλ} (λ the dead time; for a discrete loop λ = k·h, the
factor z^−k taken out of L). The frequency grid resolves R only; the delay's phase is
added exactly, so arg L — the continuous phase arg R − ωλ — is known everywhere. Between
two grid points L crosses the negative real axis once for each odd multiple of π that
phase passes; those crossings are refined together (vectorised false position with the
Illinois step, the root kept bracketed), and only in grid intervals where |L| (bounded
by |R| at the ends, with a margin ``SLACK``) could give the critical gain nearest 1 from
above or below. Gain crossovers are few (|L| = |R| ignores the delay) and are refined
the same way. For ms the grid is subdivided to resolve
the full phase only where |1 − |R|| is below the best |1 + L| found so far, then the
minimum is polished by a bounded scalar search. Each search is capped at ``MAX_POINTS``
points, lowest frequencies first.

Public API: Margins, margins, loop_margins; re-exported from rigbench.tuning.loop for
convenience: LoopController, PlantModel, LoopTransfer, loop_transfer, state_feedback_loop,
simulate_disturbance, DisturbanceResponse.

Must not import: rigbench.link, rigbench.ui, rigbench.rig, serial, textual, control.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from rigbench.tuning.loop import (DisturbanceResponse, LoopController, LoopTransfer, PlantModel,
                   loop_transfer, simulate_disturbance, state_feedback_loop)

__all__ = ["Margins", "margins", "loop_margins", "simulate_disturbance", "DisturbanceResponse",
           "LoopController", "PlantModel", "LoopTransfer", "loop_transfer",
           "state_feedback_loop", "ROOTS_MAX_DEGREE"]

ROOTS_MAX_DEGREE = 60      # discrete loops above this degree: Nyquist count, not roots
SLACK = 1.1                # |R| between two grid points stays within this factor of the ends
STEP_RAD = 0.2             # phase resolution of the grids
MAX_POINTS = 2_000_000     # cap on crossings refined and on points added for ms


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


def _strip(p) -> tuple[np.ndarray, int]:
    """(p without its trailing zero coefficients, how many were taken off)."""
    p = np.asarray(p, dtype=float)
    tol = 1e-15 * float(np.sum(np.abs(p)))
    k = 0
    while k < len(p) - 1 and abs(p[-1 - k]) <= tol:
        k += 1
    return p[:len(p) - k], k


class _Split:
    """L(jω) = R(jω)·e^{−jω·lag}: R rational without the pure delay (see the docstring)."""

    def __init__(self, loop: LoopTransfer):
        self.h = loop.h_s
        if loop.h_s is None:
            self.num = np.asarray(loop.num, dtype=float)
            self.den = np.asarray(loop.den, dtype=float)
            self.k, self.lag = 0, float(loop.delay_s)
        else:
            self.num, a = _strip(loop.num)
            self.den, b = _strip(loop.den)
            self.k = b - a                  # L = R(z)·z^−k
            self.lag = self.k * loop.h_s

    def rational(self, w) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        x = 1j * w if self.h is None else np.exp(1j * w * self.h)
        return np.polyval(self.num, x) / np.polyval(self.den, x)

    def full(self, w) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        return self.rational(w) * np.exp(-1j * w * self.lag)


def _scale(loop: LoopTransfer, sp: _Split) -> tuple[float, float]:
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
        return float(np.abs(sp.rational(np.array([w]))[0]))

    for _ in range(8):  # |L| still large at the top: the crossover lies higher
        if mag(hi) <= 0.1:
            break
        hi *= 10.0
    for _ in range(8):  # |L| small but rising to the left (integrators): look lower
        if mag(lo) >= 10.0 or mag(lo / 10.0) <= 1.5 * mag(lo):
            break
        lo /= 10.0
    return lo, hi


def _grid(sp: _Split, lo: float, hi: float, per_decade: int = 200):
    """Grid resolving R (not the delay): refined where R's phase turns fast."""
    n = int(per_decade * math.log10(hi / lo)) + 2
    w = np.geomspace(lo, hi, n)
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(12):
            r = sp.rational(w)
            dph = np.abs(np.angle(r[1:] / r[:-1]))
            big = (dph > STEP_RAD) & (np.maximum(np.abs(r[1:]), np.abs(r[:-1])) > 1e-3)
            if not big.any():
                break
            w = np.sort(np.r_[w, 0.5 * (w[1:] + w[:-1])[big]])
    return w, sp.rational(w)


def _bracketed_roots(fun, a: np.ndarray, b: np.ndarray, rel: float = 1e-14,
            max_iter: int = 200) -> np.ndarray:
    """Roots of fun(x, j) in [a[j], b[j]] (a sign change at the ends), all at once: false
    position with the Illinois step (an end kept twice has its value halved), which keeps
    the root bracketed and converges superlinearly; stops when every bracket is narrower
    than rel·|b| or a value is exactly 0."""
    if len(a) == 0:
        return np.zeros(0)
    j = np.arange(len(a))
    a, b = a.astype(float), b.astype(float)
    fa, fb = fun(a, j), fun(b, j)
    kept = np.zeros(len(a), dtype=np.int8)          # −1: a kept last time, +1: b kept
    done = (fa == 0) | (fb == 0)
    for _ in range(max_iter):
        live = ~done & (b - a > rel * np.abs(b))
        if not live.any():
            break
        i = np.flatnonzero(live)
        ai, bi, fai, fbi = a[i], b[i], fa[i], fb[i]
        with np.errstate(invalid="ignore", divide="ignore"):
            c = (ai * fbi - bi * fai) / (fbi - fai)
        bad = ~np.isfinite(c) | (c <= ai) | (c >= bi)
        c = np.where(bad, 0.5 * (ai + bi), c)
        fc = fun(c, j[i])
        right = np.sign(fc) == np.sign(fai)          # the root lies in [c, b]
        hit = fc == 0
        # move the end on the root's far side to c; halve the value of an end kept twice
        a[i] = np.where(right, c, ai)
        fa[i] = np.where(right, fc, np.where(kept[i] == -1, 0.5 * fai, fai))
        b[i] = np.where(right, bi, c)
        fb[i] = np.where(right, np.where(kept[i] == 1, 0.5 * fbi, fbi), fc)
        kept[i] = np.where(right, 1, -1)
        a[i], b[i] = np.where(hit, c, a[i]), np.where(hit, c, b[i])
        done[i] |= hit
    out = 0.5 * (a + b)
    out = np.where(fa == 0, a, out)
    return np.where(fb == 0, b, out)


def _gain_crossovers(sp: _Split, w, r) -> np.ndarray:
    logm = np.log(np.abs(r))
    i = np.flatnonzero(np.sign(logm[1:]) * np.sign(logm[:-1]) < 0)
    roots = _bracketed_roots(lambda x, j: np.log(np.abs(sp.rational(x))), w[i], w[i + 1])
    return np.r_[roots, w[logm == 0]]


def _bounds(mag: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bounds of |R| inside each grid interval."""
    return (np.minimum(mag[1:], mag[:-1]) / SLACK, np.maximum(mag[1:], mag[:-1]) * SLACK)


def _phase_crossovers(sp: _Split, w, r, phr) -> tuple[np.ndarray, np.ndarray]:
    """Negative-real-axis crossings (ω, |L|) that can hold the critical gains nearest 1."""
    psi = (phr - w * sp.lag + math.pi) / (2.0 * math.pi)  # an integer on the negative axis
    fl = np.floor(psi)
    first = np.minimum(fl[1:], fl[:-1]) + 1.0
    count = np.abs(fl[1:] - fl[:-1]).astype(np.int64)
    lo, hi = _bounds(np.abs(r))
    has = count > 0
    inside = has & (hi < 1.0)                       # every crossing there has |L| < 1
    best_below = float(np.max(lo[inside])) if inside.any() else 0.0
    outside = has & (lo > 1.0)
    best_above = float(np.min(hi[outside])) if outside.any() else math.inf
    keep = has & (((lo < 1.0) & (hi >= best_below)) | ((hi > 1.0) & (lo <= best_above)))
    idx = np.flatnonzero(keep)
    counts = np.minimum(count[idx], MAX_POINTS)
    total = int(np.sum(counts))
    if total > MAX_POINTS:  # keep the lowest frequencies
        cut = int(np.searchsorted(np.cumsum(counts), MAX_POINTS, side="right"))
        idx, counts = idx[:max(cut, 1)], counts[:max(cut, 1)]
    ii = np.repeat(idx, counts)
    starts = np.repeat(np.cumsum(counts) - counts, counts)
    n = first[ii] + (np.arange(len(ii)) - starts)

    def g(x, j):
        i = ii[j]
        return (phr[i] + np.angle(sp.rational(x) / r[i]) - x * sp.lag + math.pi
                - 2.0 * math.pi * n[j])

    with np.errstate(divide="ignore", invalid="ignore"):
        x = _bracketed_roots(g, w[ii], w[ii + 1])
        lv = sp.full(x)
        ok = (lv.real < 0) & (np.abs(np.angle(-lv)) < 1e-6)
    return x[ok], np.abs(lv[ok])


def _peak_sensitivity(sp: _Split, w, r, phr, extra_w) -> float:
    """max |1/(1 + L)|: grid, then subdivisions where the full phase turns fast and
    |1 + L| could beat the best so far, then a bounded search around the minimum."""
    pts = np.r_[w, extra_w]
    dist = np.abs(1.0 + sp.full(pts))
    best = float(np.min(dist))
    turn = np.abs(np.diff(phr)) + abs(sp.lag) * np.diff(w)
    lo, hi = _bounds(np.abs(r))
    floor = np.where((lo <= 1.0) & (hi >= 1.0), 0.0, np.minimum(np.abs(1 - lo), np.abs(1 - hi)))
    need = np.flatnonzero((turn > STEP_RAD) & (floor < best))
    if len(need):
        pieces = np.ceil(turn[need] / STEP_RAD).astype(np.int64)
        cap = int(np.searchsorted(np.cumsum(pieces - 1), MAX_POINTS, side="right"))
        need, pieces = need[:max(cap, 1)], pieces[:max(cap, 1)]
        ii = np.repeat(need, pieces - 1)
        frac = (np.arange(len(ii)) - np.repeat(np.cumsum(pieces - 1) - (pieces - 1),
                                               pieces - 1) + 1) / np.repeat(pieces, pieces - 1)
        sub = w[ii] + (w[ii + 1] - w[ii]) * frac
        pts = np.r_[pts, sub]
        dist = np.r_[dist, np.abs(1.0 + sp.full(sub))]
    order = np.argsort(pts)
    pts, dist = pts[order], dist[order]
    i = int(np.argmin(dist))
    a, b = pts[max(i - 1, 0)], pts[min(i + 1, len(pts) - 1)]
    best = float(dist[i])
    if b > a:
        res = minimize_scalar(lambda x: float(np.abs(1.0 + sp.full(np.array([x]))[0])),
                              bounds=(a, b), method="bounded", options={"xatol": 1e-10 * b})
        best = min(best, float(res.fun))
    return 1.0 / best if best > 0 else math.inf


def _roots_stable(loop: LoopTransfer) -> bool:
    poles = np.roots(np.polyadd(loop.den, loop.num))
    if loop.h_s is not None:
        return bool(np.all(np.abs(poles) < 1.0 - 1e-10))
    return bool(np.all(poles.real < -1e-10 * max(1.0, np.max(np.abs(poles), initial=1.0))))


def _turn(f, x: np.ndarray) -> float:
    """Total change of arg f along the path parameter x, refined until steps < 0.3 rad."""
    for _ in range(20):
        fv = f(x)
        big = np.abs(np.angle(fv[1:] / fv[:-1])) > 0.3
        if not big.any():
            break
        x = np.sort(np.r_[x, 0.5 * (x[1:] + x[:-1])[big]])
    fv = f(x)
    return float(np.sum(np.angle(fv[1:] / fv[:-1])))


def _nyquist_stable(loop: LoopTransfer, w_lo: float, w_hi: float) -> bool:
    sigma = w_lo * 1e-2
    p = int(np.sum(np.roots(loop.den).real > sigma))

    def f(w):
        s = sigma + 1j * w
        return 1.0 + np.polyval(loop.num, s) / np.polyval(loop.den, s) * np.exp(-s * loop.delay_s)

    # ω from 0 to ∞; the mirror half doubles it
    turn = _turn(f, np.r_[0.0, np.geomspace(sigma * 1e-3, w_hi * 10, 4000)])
    return round(p - 2.0 * turn / (2.0 * math.pi)) == 0


def _nyquist_stable_z(sp: _Split, h: float, w_lo: float) -> bool:
    shift = w_lo * 1e-2 * h
    rho = math.exp(shift)
    p = int(np.sum(np.abs(np.roots(sp.den)) > rho)) if len(sp.den) > 1 else 0

    def f(theta):
        z = rho * np.exp(1j * theta)
        return 1.0 + (np.polyval(sp.num, z) / np.polyval(sp.den, z)
                      * rho ** (-sp.k) * np.exp(-1j * sp.k * theta))

    # θ from 0 to π (counter-clockwise); the mirror half doubles it
    turn = _turn(f, np.r_[0.0, np.geomspace(shift * 1e-3, math.pi, 4000)])
    return round(p - 2.0 * turn / (2.0 * math.pi)) == 0


def _ends(loop: LoopTransfer) -> list:
    """Critical gains at ω = 0 and ω = ∞ (continuous) or the Nyquist frequency."""
    crit = []
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
    return crit


def loop_margins(loop: LoopTransfer) -> Margins:
    """Margins of a loop transfer (see the module docstring for definitions)."""
    sp = _Split(loop)
    lo, hi = _scale(loop, sp)
    w, r = _grid(sp, lo, hi)
    with np.errstate(divide="ignore", invalid="ignore"):
        phr = np.unwrap(np.angle(r))
        wc = _gain_crossovers(sp, w, r)
    lc = sp.full(wc)
    # phase margin 180° + arg L ≡ arg(−L), taken in (−180°, 180°]
    pms = [(math.degrees(math.atan2(-v.imag, -v.real)), float(x)) for v, x in zip(lc, wc)]
    w_pc, mag_pc = _phase_crossovers(sp, w, r, phr)
    crit = [(1.0 / m, float(x)) for m, x in zip(mag_pc, w_pc)] + _ends(loop)

    if loop.h_s is None and loop.delay_s > 0:
        stable, method = _nyquist_stable(loop, lo, hi), "Nyquist count (dead time)"
    elif loop.h_s is not None and len(loop.den) - 1 > ROOTS_MAX_DEGREE:
        stable, method = _nyquist_stable_z(sp, loop.h_s, lo), "Nyquist count (long dead time)"
    else:
        stable, method = _roots_stable(loop), "closed-loop poles"

    ms = float(_peak_sensitivity(sp, w, r, phr, np.r_[wc, w_pc]))

    upper = lower = w_up = None
    if stable:
        above = [(k, x) for k, x in crit if k > 1.0]
        below = [k for k, _ in crit if k < 1.0]
        if above:
            upper, w_up = min(above)
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

    return Margins(bool(stable), f(upper), _db(upper), f(lower), _db(lower), f(pm), f(wgc),
                   f(dm), ms, 20.0 * math.log10(ms) if math.isfinite(ms) else math.inf,
                   f(w_up), method)
