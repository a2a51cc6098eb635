"""Low-order process models fitted to measured frequency-response points of a relay test.

:func:`harmonic_points` measures G at ω and 3ω (ω in rad/s, gain in y-units per u-unit,
phase in degrees); the fits are ``'lag'`` K·e^{−Ls}/(T·s + 1)^n and ``'integrating'``
K·e^{−Ls}/(s·(T·s + 1)^n), n = 1 … 4, T and L in s. Why the harmonics give exact points,
the least-squares fit on the complex logarithm and the choice of order: docs/METHODS.md
§3.3. These models exist to predict margins and disturbance responses of proposals; they
are deliberately simple and say how well they fit (``fit_rms``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from rigbench.tuning.loop import PlantModel
from rigbench.tuning.point import FrequencyPoint
from rigbench.tuning.relay import fundamental_ratio

__all__ = ["ProcessModel", "harmonic_points", "fit_process_model", "MODEL_KINDS"]

MODEL_KINDS = ("lag", "integrating")
MAX_ORDER = 4


@dataclass(frozen=True)
class ProcessModel:
    """A fitted low-order model in the units of the analysed signals (gain y/u)."""

    kind: str                      # 'lag' or 'integrating'
    gain: float                    # K: static gain (lag) or velocity gain, signed
    time_constant_s: float         # T
    delay_s: float                 # L
    order: int                     # n, the number of equal lags
    fit_rms: float                 # RMS of |log(G_model/G_measured)| over the points
    points: tuple[FrequencyPoint, ...]
    static_gain_used: bool

    def plant_model(self) -> PlantModel:
        den = [1.0]
        if self.time_constant_s > 0:
            for _ in range(self.order):
                den = list(np.polymul(den, [self.time_constant_s, 1.0]))
        if self.kind == "integrating":
            den = list(np.polymul(den, [1.0, 0.0]))
        return PlantModel([self.gain], den, self.delay_s)

    def response(self, omega_rad_s) -> np.ndarray:
        return self.plant_model().response(omega_rad_s)

    def describe(self) -> str:
        s = "" if self.kind == "lag" else "s·"
        n = f"^{self.order}" if self.order > 1 else ""
        return (f"{self.gain:.4g}·e^(-{self.delay_s:.4g}s)/({s}({self.time_constant_s:.4g}s+1)"
                f"{n}), fit {100 * self.fit_rms:.2g}% rms")


def harmonic_points(t_s, u, y, *, t_start_s: float, t_end_s: float, cycles: int,
                    harmonics=(1, 3), phase_centre_deg: float = -180.0,
                    boundaries_s=None) -> list[FrequencyPoint]:
    """G(j·k·ω) for each harmonic k over the window [t_start_s, t_end_s] holding ``cycles``
    whole periods (u held between samples, y sampled; see rigbench.tuning.relay).

    ``boundaries_s``: the cycle boundaries (times of the relay's rising switches) in the
    window. When given, a slow linear drift of u and y (an outer loop still settling) is
    removed first: a periodic signal takes the same value at every boundary, so the line
    through the boundary samples is the drift. Without this a drift leaks into the
    fundamental (measured: 3.6% and 4° on the balance rig's speed drive).
    """
    t = np.asarray(t_s, dtype=float)
    a = int(np.searchsorted(t, t_start_s - 1e-9))
    b = int(np.searchsorted(t, t_end_s + 1e-9)) - 1
    if b - a < 4 or cycles < 1:
        raise ValueError("window too short for harmonic points")
    tw, uw, yw = t[a:b + 1], np.asarray(u, float)[a:b + 1], np.asarray(y, float)[a:b + 1]
    if boundaries_s is not None and len(boundaries_s) >= 2:
        idx = np.clip(np.searchsorted(tw, np.asarray(boundaries_s) - 1e-9), 0, len(tw) - 1)
        tb = tw[idx]
        if np.ptp(tb) > 0:
            uw = uw - np.polyfit(tb, uw[idx], 1)[0] * (tw - tw[0])
            yw = yw - np.polyfit(tb, yw[idx], 1)[0] * (tw - tw[0])
    return [fundamental_ratio(tw, uw, yw, n_periods=k * cycles,
                              phase_centre_deg=phase_centre_deg) for k in harmonics]


def _wrap(x: np.ndarray) -> np.ndarray:
    return (x + math.pi) % (2.0 * math.pi) - math.pi


def _model_log(kind: str, n: int, k: float, tc: float, delay: float,
               w: np.ndarray) -> np.ndarray:
    """log G(jω) of the (positive-gain) model, phase continuous."""
    mag = math.log(k) - 0.5 * n * np.log1p((w * tc) ** 2)
    ph = -n * np.arctan(w * tc) - w * delay
    if kind == "integrating":
        mag = mag - np.log(w)
        ph = ph - math.pi / 2
    return mag + 1j * ph


def _fit_order(kind, n, w, logs, fixed_k, delay_grid):
    """Best least-squares fit of one model order; returns (cost, k, tc, delay, rms)."""

    def unpack(p):
        if fixed_k is not None:
            return fixed_k, math.exp(p[0]), p[1]
        return math.exp(p[0]), math.exp(p[1]), p[2]

    def resid(p):
        k, tc, delay = unpack(p)
        d = _model_log(kind, n, k, tc, delay, w) - logs
        return np.r_[d.real, _wrap(d.imag)]

    w1, r1 = w[0], math.exp(logs[0].real)
    lag_total = -float(np.angle(np.exp(1j * logs[0].imag)))  # in [0, 2π)
    if lag_total < 0:
        lag_total += 2 * math.pi
    if kind == "integrating":
        lag_total = (lag_total - math.pi / 2) % (2 * math.pi)
    best = None
    for frac in np.linspace(0.0, 1.0, delay_grid):
        # start by splitting the measured phase lag between the lags and the delay
        each = min(lag_total * (1 - frac) / n, math.pi / 2 - 1e-3)
        delay0 = max(lag_total - n * each, 0.0) / w1
        tc0 = max(math.tan(each) / w1, 1e-6)
        k0 = r1 * (1 + (w1 * tc0) ** 2) ** (n / 2) * (w1 if kind == "integrating" else 1.0)
        x0 = [math.log(max(k0, 1e-12)), math.log(tc0), delay0]
        lo = [math.log(1e-12), math.log(1e-9), 0.0]
        hi = [math.log(1e12), math.log(1e9), 1e9]
        if fixed_k is not None:
            x0, lo, hi = x0[1:], lo[1:], hi[1:]
        fit = least_squares(resid, np.clip(x0, lo, hi), bounds=(lo, hi), x_scale="jac")
        if best is None or fit.cost < best.cost:
            best = fit
    k, tc, delay = unpack(best.x)
    r = resid(best.x)
    rms = float(np.sqrt(np.mean(r[:len(w)] ** 2 + r[len(w):] ** 2)))
    return best.cost, k, tc, float(delay), rms


def fit_process_model(points, *, kind: str = "lag", static_gain: float | None = None,
                      orders=tuple(range(1, MAX_ORDER + 1)), delay_grid: int = 6,
                      order_tie: float = 1.25) -> ProcessModel:
    """Fit a :class:`ProcessModel` of ``kind`` to measured points (see module docstring).

    The gain's sign is taken from the fundamental: a loop under a relay oscillates where
    the plant's phase is between −180° (no hysteresis) and −90° (a hysteresis as wide as
    the oscillation); a point 180° away from there means the plant's gain is negative. With ``static_gain`` (stable loops) K is fixed to it. Of the ``orders``
    tried, the lowest whose cost is within ``order_tie`` times the best one is kept.
    """
    if kind not in MODEL_KINDS:
        raise ValueError(f"kind must be one of {MODEL_KINDS}")
    pts = tuple(points)
    if not pts:
        raise ValueError("need at least one point")
    w = np.array([p.omega_rad_s for p in pts])
    logs = np.array([math.log(p.gain) + 1j * math.radians(p.phase_deg) for p in pts])
    # a relay cycle of a positive-gain plant sits between −180° (no hysteresis) and −90°
    # (a wide band); a negative-gain plant's 180° away: split halfway, at −45° and 135°
    sign = 1.0 if abs((pts[0].phase_deg + 135.0 + 180.0) % 360.0 - 180.0) < 90.0 else -1.0
    if sign < 0:
        logs = logs + 1j * math.pi
    fixed_k = None
    if static_gain is not None and kind == "lag":
        if static_gain * sign <= 0:
            raise ValueError("static gain and points disagree about the plant's sign")
        fixed_k = abs(static_gain)
    fits = {n: _fit_order(kind, n, w, logs, fixed_k, delay_grid) for n in orders}
    floor = min(f[0] for f in fits.values())
    n = min(n for n, f in fits.items() if f[0] <= order_tie * floor + 1e-12)
    _, k, tc, delay, rms = fits[n]
    if tc < 1e-8:
        tc = 0.0
    return ProcessModel(kind, sign * k, tc, delay, n, rms, pts, fixed_k is not None)
