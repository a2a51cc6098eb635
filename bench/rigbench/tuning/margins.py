"""Stability margins of a loop: gain margins (upper and lower), phase and delay margin,
peak sensitivity, and closed-loop stability.

Definitions (L the loop transfer for negative feedback, see rigbench.tuning.loop):
- The closed loop stays stable for gain factors k in (gain_margin_lower, gain_margin_upper)
  around 1. The ends are the critical gains 1/|L(jω)| where L crosses the negative real
  axis (ω = 0 and ω = ∞, or the Nyquist frequency of a sampled loop, included): the
  nearest one above 1 and the nearest one below 1.
- Phase margin: 180° + arg L at every gain crossover |L| = 1; the worst (smallest) one is
  reported with its crossover frequency. Delay margin: the smallest extra dead time that
  destabilises, min over crossovers of (phase margin in rad, taken in [0, 2π))/ω_c; for a
  sampled loop the extra dead time is taken as the phase lag ω·τ, exact for whole samples.
- ms: max over ω of |1/(1 + L)|. dB figures are 20·log10 of the ratios.
- A margin that is None says why in ``reasons`` (rigbench.tuning.margin_result): the closed
  loop is unstable (no margins are reported for it), there is no crossover in that
  direction (the margin is unlimited), or it could not be computed.

Sampled loops (a controller with a sample time, or any SampledLoop) are analysed in state
space: rigbench.tuning.margins_sampled (exact ZOH plant with fractional dead time, the board's
PID as it runs, stability from closed-loop eigenvalues or a state-space Nyquist count).

Continuous loops (LoopTransfer in s, optionally times e^{−s·delay_s}) keep polynomials in
s, which are well conditioned at the frequencies of interest. Stability: closed-loop poles
(roots of den + num) without dead time; with dead time a Nyquist count, Z = P − winding,
P the open-loop poles right of the contour s = σ0 + jω (σ0 a small positive shift that
keeps poles at s = 0 on the left). Crossings on a grid: rigbench.tuning.crossings.

Public API: Margins, margins, loop_margins; re-exported from rigbench.tuning.loop for
convenience: LoopController, PlantModel, LoopTransfer, SampledLoop, loop_transfer,
state_feedback_loop, simulate_disturbance, DisturbanceResponse.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import signal

from .crossings import gain_crossovers, grid, peak_sensitivity, phase_crossovers
from .interconnect import SampledLoop
from .loop import (DisturbanceResponse, LoopController, LoopTransfer, PlantModel,
                   loop_transfer, simulate_disturbance, state_feedback_loop)
from .margin_result import Margins, assemble
from .margins_sampled import EIG_MAX_STATES, sampled_margins

__all__ = ["Margins", "margins", "loop_margins", "simulate_disturbance", "DisturbanceResponse",
           "LoopController", "PlantModel", "LoopTransfer", "SampledLoop", "loop_transfer",
           "state_feedback_loop", "EIG_MAX_STATES"]


def margins(controller: LoopController, plant) -> Margins:
    """Margins of a PID controller (continuous or sampled) around a plant model."""
    return loop_margins(loop_transfer(controller, plant))


def _strip(p) -> tuple[np.ndarray, int]:
    """(p without its trailing zero coefficients, how many were taken off)."""
    p = np.asarray(p, dtype=float)
    tol = 1e-15 * float(np.sum(np.abs(p)))
    k = 0
    while k < len(p) - 1 and abs(p[-1 - k]) <= tol:
        k += 1
    return p[:len(p) - k], k


def _as_sampled(loop: LoopTransfer) -> SampledLoop:
    """A discrete LoopTransfer given as polynomials in z, in state space: the factor z^−k
    of its trailing zeros kept apart, the rest realised by scipy's tf2ss."""
    num, a = _strip(loop.num)
    den, b = _strip(loop.den)
    k = b - a
    if k < 0:
        num = np.r_[num, np.zeros(-k)]
        k = 0
    if len(num) > len(den):
        raise ValueError("loop transfer in z is not proper")
    aa, bb, cc, dd = signal.tf2ss(num, den)
    return SampledLoop.build(aa, bb, cc, dd, loop.h_s, k, "loop given as polynomials in z")


class _Split:
    """L(jω) = R(jω)·e^{−jω·lag} of a continuous loop."""

    def __init__(self, loop: LoopTransfer):
        self.num = np.asarray(loop.num, dtype=float)
        self.den = np.asarray(loop.den, dtype=float)
        self.lag = float(loop.delay_s)

    def rational(self, w) -> np.ndarray:
        s = 1j * np.asarray(w, dtype=float)
        return np.polyval(self.num, s) / np.polyval(self.den, s)

    def full(self, w) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        return self.rational(w) * np.exp(-1j * w * self.lag)


def _scale(loop: LoopTransfer, sp: _Split) -> tuple[float, float]:
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


def _roots_stable(loop: LoopTransfer) -> bool:
    poles = np.roots(np.polyadd(loop.den, loop.num))
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



def _ends(loop: LoopTransfer) -> list:
    """Critical gains at ω = 0 and ω = ∞."""
    crit = []
    if abs(loop.den[-1]) > 0:
        l0 = loop.num[-1] / loop.den[-1]
        if l0 < 0:
            crit.append((1.0 / abs(l0), 0.0))
    if len(loop.num) == len(loop.den) and loop.num[0] != 0:
        linf = loop.num[0] / loop.den[0]
        if linf < 0 or loop.delay_s > 0:
            crit.append((1.0 / abs(linf), math.inf))
    return crit


def loop_margins(loop) -> Margins:
    """Margins of a loop transfer (see the module docstring for definitions): a
    SampledLoop, or a LoopTransfer in s (or in z, converted to state space)."""
    if isinstance(loop, SampledLoop):
        return sampled_margins(loop)
    if loop.h_s is not None:
        return sampled_margins(_as_sampled(loop))
    sp = _Split(loop)
    lo, hi = _scale(loop, sp)
    w, r = grid(sp, lo, hi)
    with np.errstate(divide="ignore", invalid="ignore"):
        phr = np.unwrap(np.angle(r))
        wc = gain_crossovers(sp, w, r)
    w_pc, mag_pc = phase_crossovers(sp, w, r, phr)
    crit = [(1.0 / m, float(x)) for m, x in zip(mag_pc, w_pc)] + _ends(loop)
    if loop.delay_s > 0:
        stable, method = _nyquist_stable(loop, lo, hi), "Nyquist count (dead time)"
    else:
        stable, method = _roots_stable(loop), "closed-loop poles"
    ms = float(peak_sensitivity(sp, w, r, phr, np.r_[wc, w_pc]))
    return assemble(stable, method, wc, sp.full(wc), crit, ms)
