"""Stability margins of a sampled loop given in state space (rigbench.tuning.interconnect
:class:`SampledLoop`, L(z) = z^−k·R(z)).

- Frequency response: R(e^{jωh}) from (e^{jωh}I − A)x = B (rigbench.tuning.sampled
  FrequencyEvaluator), times the exact e^{−jωkh}. No polynomial in z is ever formed.
- Grid: logarithmic from ω_lo to the Nyquist frequency π/h, 200 points a decade, refined
  where R turns fast; ω_lo lies two decades below the slowest pole or zero of R (at most
  1e-6·π/h) and further down while an integrator could still put a crossover below it.
- Gain crossovers |L| = 1 and phase crossovers arg L = −180° (mod 360°) are bracketed on
  the grid and refined (rigbench.tuning.crossings); the ends ω = 0 (z = 1) and ω = π/h
  (z = −1) count as phase crossovers where L is real and negative there.
- Stability: eigenvalues of the closed-loop state matrix (R's states plus the k delay
  registers) when there are at most ``EIG_MAX_STATES`` of them; above that (long dead
  times: one eigenvalue problem of a few hundred states costs more than everything else)
  the Nyquist criterion on the circle |z| = ρ = 1 + ``RHO_EPS``, counted with the state-space
  response: Z = P − Δarg(1 + L)/π over θ ∈ [0, π], P the poles of R with |z| > ρ. The
  circle is sampled finely enough that the delay's phase moves < 0.4 rad between points
  wherever |L| could reach 2/3 (elsewhere 1 + L stays in the right half-plane and cannot
  wind); a count that is not within 0.2 of a whole number falls back to the eigenvalues.
  Poles of R within RHO_EPS of the circle (integrators) count as inside, as they should.
  Hidden modes (interconnect docstring) are eigenvalues of A, so both tests count one
  outside the circle as unstable (P includes it, no encirclement can cancel it); drift
  modes at z = 1 have been taken out and are reported in ``drift_modes``.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
from scipy import linalg

from .crossings import (SLACK, bounds, gain_crossovers, grid, peak_sensitivity,
                        phase_crossovers)
from .interconnect import SampledLoop
from .margin_result import Margins, assemble

__all__ = ["sampled_margins", "sampled_stability", "EIG_MAX_STATES", "RHO_EPS"]

EIG_MAX_STATES = 120       # closed loops up to this many states: eigenvalues
RHO_EPS = 1e-9             # Nyquist contour radius 1 + RHO_EPS
STABLE_RADIUS = 1.0 - 1e-10   # eigenvalues must lie inside this circle


class _Split:
    """L(e^{jωh}) = R(e^{jωh})·e^{−jω·lag}, R evaluated in state space."""

    def __init__(self, loop: SampledLoop):
        self.h, self.lag, self.k = loop.h_s, loop.lag_s, loop.delay_samples
        self.ev = loop.evaluator()

    def rational(self, w) -> np.ndarray:
        return self.ev(np.exp(1j * np.asarray(w, dtype=float) * self.h))

    def full(self, w) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        return self.rational(w) * np.exp(-1j * w * self.lag)


def _corners(loop: SampledLoop) -> list[float]:
    """|ln z|/h of the poles and finite zeros of R (rad/s), integrators left out."""
    h, n = loop.h_s, loop.n_states
    pts = list(loop.open_loop_poles())
    if n:
        big = np.block([[loop.a, loop.b], [loop.c, np.array([[loop.d]])]])
        eye = linalg.block_diag(np.eye(n), np.zeros((1, 1)))
        with np.errstate(all="ignore"):
            zs = linalg.eigvals(big, eye)
        pts += [z for z in zs if np.isfinite(z)]
    out = []
    for z in pts:
        if abs(z) > 1e-300:
            c = abs(cmath.log(complex(z))) / h
            if c > 1e-12 / h:
                out.append(c)
    return out


def _range(loop: SampledLoop, sp: _Split) -> tuple[float, float]:
    nyq = math.pi / loop.h_s
    lo = min([nyq * 1e-6] + [0.01 * c for c in _corners(loop)])
    lo = max(lo, nyq * 1e-12)

    def mag(w):
        return float(np.abs(sp.rational(np.array([w]))[0]))

    for _ in range(8):  # |L| small but rising to the left (integrators): look lower
        if mag(lo) >= 10.0 or mag(lo / 10.0) <= 1.5 * mag(lo):
            break
        lo /= 10.0
    return lo, nyq


def _ends(loop: SampledLoop, sp: _Split) -> list:
    """Critical gains at ω = 0 (z = 1) and ω = π/h (z = −1) where L is real and < 0."""
    crit = []
    poles = loop.open_loop_poles()
    for z, wz in ((1.0, 0.0), (-1.0, math.pi / loop.h_s)):
        if len(poles) and np.min(np.abs(poles - z)) < 1e-9:
            continue                     # an integrator (or a pole at −1): |L| infinite
        lz = complex(sp.ev(np.array([z]))[0]) * (1.0 if z > 0 else (-1.0) ** loop.delay_samples)
        if np.isfinite(lz) and lz.real < 0 and abs(lz.imag) <= 1e-9 * abs(lz):
            crit.append((1.0 / abs(lz.real), wz))
    return crit


def _eig_stable(loop: SampledLoop) -> bool:
    ev = np.linalg.eigvals(loop.closed_loop_matrix())
    return bool(np.all(np.abs(ev) < STABLE_RADIUS)) if len(ev) else True


def _contour_points(loop: SampledLoop, sp: _Split, w: np.ndarray) -> np.ndarray:
    """θ in [0, π] resolving R (the margin grid), the unit-circle poles and the delay."""
    h = loop.h_s
    th = [np.array([0.0, math.pi]), w * h]
    for p in loop.open_loop_poles():
        if abs(abs(p) - 1.0) < 1e-6:
            tp = abs(cmath.phase(p))
            ring = np.geomspace(RHO_EPS * 1e-3, 0.05, 80)
            th += [tp + ring, tp - ring]
    th = np.unique(np.clip(np.concatenate(th), 0.0, math.pi))
    r = sp.ev((1.0 + RHO_EPS) * np.exp(1j * th))
    if sp.k:
        # where |L| could reach 2/3, put enough points that the delay turns < 0.4 rad
        hi = bounds(np.abs(r))[1]
        turn = sp.k * np.diff(th) + np.abs(np.angle(r[1:] / r[:-1]))
        need = np.flatnonzero((hi * SLACK >= 2.0 / 3.0) & (turn > 0.4))
        if len(need):
            pieces = np.ceil(turn[need] / 0.4).astype(np.int64)
            sub = [np.linspace(th[i], th[i + 1], p + 1)[1:-1] for i, p in zip(need, pieces)]
            th = np.unique(np.concatenate([th] + sub))
    return th


def _nyquist(loop: SampledLoop, sp: _Split, w: np.ndarray) -> float | None:
    """Closed-loop poles outside the unit circle by the Nyquist count (None: undecided)."""
    rho, k = 1.0 + RHO_EPS, loop.delay_samples
    p = int(np.sum(np.abs(loop.open_loop_poles()) > rho))

    def f(theta):
        z = rho * np.exp(1j * theta)
        return 1.0 + sp.ev(z) * rho ** (-k) * np.exp(-1j * k * theta)

    th = _contour_points(loop, sp, w)
    for _ in range(30):
        fv = f(th)
        if not np.all(np.isfinite(fv)):
            return None
        big = np.abs(np.angle(fv[1:] / fv[:-1])) > 0.5
        if not big.any():
            break
        th = np.sort(np.r_[th, 0.5 * (th[1:] + th[:-1])[big]])
    else:
        return None
    count = p - float(np.sum(np.angle(fv[1:] / fv[:-1]))) / math.pi
    return round(count) if abs(count - round(count)) < 0.2 else None


def sampled_stability(loop: SampledLoop, sp: _Split | None = None,
                      w: np.ndarray | None = None) -> tuple[bool, str]:
    """(stable, how it was decided) — see the module docstring."""
    total = loop.n_states + loop.delay_samples
    if total <= EIG_MAX_STATES:
        return _eig_stable(loop), f"closed-loop eigenvalues ({total} states)"
    sp = sp or _Split(loop)
    if w is None:
        w = grid(sp, *_range(loop, sp))[0]
    z = _nyquist(loop, sp, w)
    if z is None:
        return _eig_stable(loop), (f"closed-loop eigenvalues ({total} states; the Nyquist "
                                   "count was not decisive)")
    return z == 0, (f"Nyquist count in state space ({loop.delay_samples} samples of dead "
                    "time)")


def sampled_margins(loop: SampledLoop) -> Margins:
    """Margins of a sampled loop (definitions in rigbench.tuning.margins)."""
    sp = _Split(loop)
    lo, hi = _range(loop, sp)
    w, r = grid(sp, lo, hi)
    with np.errstate(divide="ignore", invalid="ignore"):
        phr = np.unwrap(np.angle(r))
        wc = gain_crossovers(sp, w, r)
    w_pc, mag_pc = phase_crossovers(sp, w, r, phr)
    crit = [(1.0 / m, float(x)) for m, x in zip(mag_pc, w_pc)] + _ends(loop, sp)
    stable, method = sampled_stability(loop, sp, w)
    ms = float(peak_sensitivity(sp, w, r, phr, np.r_[wc, w_pc]))
    notes = ""
    if loop.drift_modes:
        notes = (f"{loop.drift_modes} mode(s) at z = 1 that this loop neither moves nor sees "
                 "(an integral through a plant zero at s = 0, e.g. the wheel-speed drift of "
                 "a speed-driven balance loop) not counted; another loop must settle them")
    return assemble(stable, method, wc, sp.full(wc), crit, ms, notes=notes,
                    drift_modes=loop.drift_modes)
