"""Convergence of a relay experiment's cycles: do the per-cycle figures still drift?

The per-cycle figures of a relay test (period, amplitude, and for a biased relay the
cycle's ∫y/∫u) settle to a stationary sequence whose remaining cycle-to-cycle variation is
noise (measurement noise moves the switching instants and the peaks) and, for the period,
quantisation: a board switches at its samples, so a period lying between 30 and 31
samples alternates between the two, steps of 3%. A test on consecutive changes below a
fixed tolerance never ends on such cycles. The test here asks whether the cycles still
*drift* beyond what their own scatter and resolution explain:

For each series x over a window of the last n cycles (n ≥ 3):
- a straight line x ≈ x̄ + b·(i − ī) is fitted by least squares; the **drift** is the
  change along it across the window, |b|·(n − 1), relative to the mean |x̄|;
- its standard error is se = (n − 1)·σ/√Σ(i − ī)², σ the cycle-to-cycle noise of the
  series estimated robustly from successive differences: σ = 1.4826·MAD(Δx)/√2 (MAD the
  median absolute deviation from their median; Δx of white noise has a standard
  deviation of √2·σ). A trend shifts all differences alike, so it does not inflate σ
  (the scatter about the line, or the plain standard deviation, would). σ is taken
  over the last max(n, ``noise_cycles``) cycles: a few differences cannot tell noise
  from a transient still under way, so with fewer than ``noise_cycles`` cycles recorded
  there is no noise allowance at all (the test is then drift ≤ max(tol, floor));
- the window is settled when for every series drift ≤ max(tol, floor/|x̄|, z·se/|x̄|),
  z = ``noise_sigmas`` (3: a drift within three standard errors cannot be told from
  noise), floor the series' resolution: for the period ``resolution_samples`` sample
  intervals (1.5 covers the sawtooth of a period between two whole numbers of samples,
  whose fitted drift over a window reaches up to 1.5 samples), none for the others;
  when every successive change in the window has the same sign there is no noise
  allowance (drift ≤ max(tol, floor)): a start-up transient that converges
  geometrically (a lightly damped plant's limit cycle builds up over many cycles)
  changes *all* differences and inflates σ; it was accepted 10–12% away from its final
  amplitude [calc]. White noise gives one sign throughout n − 1 differences with
  probability 2^(2−n), which only delays convergence by a cycle;
- and no series scatters by more than ``max_scatter`` (relative standard deviation): a
  relay whose band is too narrow for the noise chatters, each crossing of the band
  making a "cycle" of random length; that is not a limit cycle however long it runs.
Reported per series: mean, scatter (relative sample standard deviation), standard error
of the mean (scatter/√n: the precision of the averaged estimate — a noisy loop needs
more cycles for the same precision), drift and the allowance.

With a window of few cycles the drift test is lenient toward noise and strict only
against trends well above it; ask for more cycles (``min_cycles``) for a stricter one.
Common practice, no single source: the line fit and the standard error of its slope are
the textbook least-squares ones, the MAD scale factor 1.4826 is that of a normal
distribution.

Public API: SeriesCheck, CycleCheck, check_cycles, settled_cycles.

Must not import: rigbench.link, rigbench.ui, rigbench.rig, serial, textual, control.
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
