"""Crossings of a loop transfer L(jω) = R(jω)·e^{−jω·lag} on a frequency grid, shared by
the continuous and the sampled margins (rigbench.tuning.margins, rigbench.tuning.margins_sampled).

``sp`` is any object with ``rational(w)`` (R at the frequencies w, rad/s), ``full(w)``
(L = R·e^{−jω·lag}) and ``lag`` (s). The grid resolves R only; the delay's phase −ω·lag is
added exactly, so arg L — the continuous phase arg R − ω·lag — is known everywhere.
Between two grid points L crosses the negative real axis once for each odd multiple of π
that phase passes; those crossings are refined together (vectorised false position with
the Illinois step, the root kept bracketed), and only in grid intervals where |L| (bounded
by |R| at the ends, with a margin ``SLACK``) could give the critical gain nearest 1 from
above or below. Gain crossovers are few (|L| = |R| ignores the delay) and are refined the
same way. For the peak sensitivity the grid is subdivided to resolve the full phase only
where |1 − |R|| is below the best |1 + L| found so far, then the minimum is polished by a
bounded scalar search. Each search is capped at ``MAX_POINTS`` points, lowest
frequencies first.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize_scalar

__all__ = ["grid", "bracketed_roots", "gain_crossovers", "bounds", "phase_crossovers",
           "peak_sensitivity", "SLACK", "STEP_RAD", "MAX_POINTS"]

SLACK = 1.1                # |R| between two grid points stays within this factor of the ends
STEP_RAD = 0.2             # phase resolution of the grids
MAX_POINTS = 2_000_000     # cap on crossings refined and on points added for ms


def grid(sp, lo: float, hi: float, per_decade: int = 200):
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


def bracketed_roots(fun, a: np.ndarray, b: np.ndarray, rel: float = 1e-14,
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


def gain_crossovers(sp, w, r) -> np.ndarray:
    logm = np.log(np.abs(r))
    i = np.flatnonzero(np.sign(logm[1:]) * np.sign(logm[:-1]) < 0)
    roots = bracketed_roots(lambda x, j: np.log(np.abs(sp.rational(x))), w[i], w[i + 1])
    return np.r_[roots, w[logm == 0]]


def bounds(mag: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bounds of |R| inside each grid interval."""
    return (np.minimum(mag[1:], mag[:-1]) / SLACK, np.maximum(mag[1:], mag[:-1]) * SLACK)


def phase_crossovers(sp, w, r, phr) -> tuple[np.ndarray, np.ndarray]:
    """Negative-real-axis crossings (ω, |L|) that can hold the critical gains nearest 1."""
    psi = (phr - w * sp.lag + math.pi) / (2.0 * math.pi)  # an integer on the negative axis
    fl = np.floor(psi)
    first = np.minimum(fl[1:], fl[:-1]) + 1.0
    count = np.abs(fl[1:] - fl[:-1]).astype(np.int64)
    lo, hi = bounds(np.abs(r))
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
        x = bracketed_roots(g, w[ii], w[ii + 1])
        lv = sp.full(x)
        ok = (lv.real < 0) & (np.abs(np.angle(-lv)) < 1e-6)
    return x[ok], np.abs(lv[ok])


def peak_sensitivity(sp, w, r, phr, extra_w) -> float:
    """max |1/(1 + L)|: grid, then subdivisions where the full phase turns fast and
    |1 + L| could beat the best so far, then a bounded search around the minimum."""
    pts = np.r_[w, extra_w]
    dist = np.abs(1.0 + sp.full(pts))
    best = float(np.min(dist))
    turn = np.abs(np.diff(phr)) + abs(sp.lag) * np.diff(w)
    lo, hi = bounds(np.abs(r))
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
