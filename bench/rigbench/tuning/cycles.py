"""Convergence of a relay experiment's cycles: do the per-cycle figures still drift?

Series are per-cycle figures (period in s, amplitude in the measure's unit, ∫y/∫u); the
tolerances (``tol``, ``max_scatter``) are relative, ``resolution_samples`` is in sample
intervals. The test — a least-squares drift across the window of the last cycles, judged
against the series' resolution and a robust estimate of its cycle-to-cycle noise — and its
reasons are in docs/METHODS.md §3.2.

Public API: SeriesCheck, CycleCheck, check_cycles, settled_cycles.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["SeriesCheck", "CycleCheck", "check_cycles", "settled_cycles"]


@dataclass(frozen=True)
class SeriesCheck:
    """One per-cycle series over the window; relative figures are fractions of |mean|."""

    name: str
    mean: float
    scatter: float          # sample standard deviation / |mean|
    stderr: float           # scatter/√n: standard error of the window's mean
    drift: float            # |slope|·(n − 1)/|mean|
    allowed: float          # max(tol, floor/|mean|, noise_sigmas·se(drift)/|mean|)
    ok: bool                # drift <= allowed and scatter <= max_scatter


@dataclass(frozen=True)
class CycleCheck:
    cycles: int
    settled: bool
    series: tuple[SeriesCheck, ...]

    def get(self, name: str) -> SeriesCheck | None:
        return next((s for s in self.series if s.name == name), None)

    def describe(self) -> str:
        """'period drift 3.1% (allowed 2%, scatter 1.2%), amplitude …'."""
        return ", ".join(f"{s.name} drift {_pct(s.drift)} (allowed {_pct(s.allowed)}, "
                         f"scatter {_pct(s.scatter)})" for s in self.series)


def _pct(x: float) -> str:
    return f"{100 * x:.2g}%" if math.isfinite(x) else "undefined"


def _noise(x: np.ndarray) -> float:
    """Robust cycle-to-cycle noise of x: 1.4826·MAD of the successive differences / √2."""
    steps = np.diff(x)
    return 1.4826 * float(np.median(np.abs(steps - np.median(steps)))) / math.sqrt(2.0)


def _series(name: str, x: np.ndarray, tol: float, noise_sigmas: float, floor: float,
            max_scatter: float, sigma: float) -> SeriesCheck:
    n = len(x)
    if n < 3 or not np.all(np.isfinite(x)) or float(np.mean(x)) == 0.0:
        return SeriesCheck(name, float(np.mean(x)) if n else math.nan, math.nan, math.nan,
                           math.nan, tol, False)
    mean = float(np.mean(x))
    scale = abs(mean)
    i = np.arange(n) - (n - 1) / 2.0
    sii = float(i @ i)
    dx = x - mean
    slope = float(i @ dx) / sii
    drift = abs(slope) * (n - 1) / scale
    se_drift = (n - 1) * sigma / math.sqrt(sii) / scale
    allowed = max(tol, floor / scale, noise_sigmas * se_drift)
    steps = np.diff(x)
    if np.all(steps > 0) or np.all(steps < 0):
        # every change goes one way: a transient still under way (a slowly converging
        # limit cycle inflates the noise estimate from its own differences), not noise
        allowed = max(tol, floor / scale)
    scatter = float(np.std(x, ddof=1)) / scale
    return SeriesCheck(name, mean, scatter, scatter / math.sqrt(n), drift, allowed,
                       drift <= allowed and scatter <= max_scatter)


def check_cycles(series: dict, *, window: int | None = None, tol: float = 0.02,
                 noise_sigmas: float = 3.0, noise_cycles: int = 8, max_scatter: float = 0.25,
                 floors: dict | None = None) -> CycleCheck:
    """Check the last ``window`` cycles (default: all): ``series`` maps a name to its
    per-cycle values (all the same length, oldest first; cycles before the window serve
    the noise estimate); ``floors`` maps a name to its resolution, in the series' unit."""
    floors = floors or {}
    unknown = set(floors) - set(series)
    if unknown:
        raise ValueError(f"floors for unknown series: {sorted(unknown)}")
    lengths = {len(v) for v in series.values()}
    if len(lengths) != 1:
        raise ValueError("every series needs one value per cycle")
    total = lengths.pop()
    n = total if window is None else min(int(window), total)
    checks = []
    for name, v in series.items():
        x = np.asarray(v, dtype=float)
        hist = x[total - max(n, noise_cycles):] if total >= noise_cycles else x[:0]
        sigma = _noise(hist) if len(hist) > 2 and np.all(np.isfinite(hist)) else 0.0
        checks.append(_series(name, x[total - n:], tol, noise_sigmas,
                              float(floors.get(name, 0.0)), max_scatter, sigma))
    return CycleCheck(n, all(c.ok for c in checks), tuple(checks))


def settled_cycles(series: dict, *, min_cycles: int = 3, tol: float = 0.02,
                   noise_sigmas: float = 3.0, noise_cycles: int = 8,
                   max_scatter: float = 0.25, floors: dict | None = None
                   ) -> tuple[int, CycleCheck | None]:
    """The longest trailing window of at least ``min_cycles`` cycles that is settled:
    (its length, its check); (0, check of the last ``min_cycles``) when none is, and
    (0, None) with fewer cycles than that."""
    need = max(int(min_cycles), 3)
    arrays = {k: np.asarray(v, dtype=float) for k, v in series.items()}
    total = min((len(v) for v in arrays.values()), default=0)
    if total < need:
        return 0, None
    last = None
    for n in range(total, need - 1, -1):
        check = check_cycles(arrays, window=n, tol=tol, noise_sigmas=noise_sigmas,
                             noise_cycles=noise_cycles, max_scatter=max_scatter,
                             floors=floors)
        if check.settled:
            return n, check
        last = check
    return 0, last
