"""Analysis of a relay experiment: cycles, ultimate-point estimate and the exact plant point.

Inputs are logged arrays (times in s, the relay's switching signal, the plant input ``u``
and the plant output ``y`` in their own units), possibly noisy and only near-uniformly
sampled. Nothing here does I/O: the experiment runner hands in arrays (or chunks, see
:class:`RelayTracker`). ``ku`` is in u-units per y-unit, periods in s, ``omega_rad_s`` in
rad/s. Conventions (cycle boundaries, the held-input Fourier integral, the
describing-function estimate, the static gain of a biased relay, when the cycles count as
converged): docs/METHODS.md §3.1, with the relay method itself in §3.

Public API: analyse_relay, RelayResult, RelayTracker, RelayProgress, FrequencyPoint,
fundamental_ratio.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rigbench.tuning.cycles import CycleCheck, check_cycles, settled_cycles
from rigbench.tuning.point import FrequencyPoint

__all__ = ["analyse_relay", "RelayResult", "RelayTracker", "RelayProgress",
           "FrequencyPoint", "fundamental_ratio", "rising_switches"]


@dataclass(frozen=True)
class RelayResult:
    converged: bool
    reason: str                 # why not converged ('' when converged)
    cycles: int                 # cycles used for the estimates
    period_s: float | None
    period_scatter: float | None    # relative sample standard deviation of the periods
    amplitude: float | None         # mean half peak-to-peak of y per cycle
    amplitude_scatter: float | None
    ku: float | None                # 4·d/(π·a)
    tu_s: float | None              # = period_s
    point: FrequencyPoint | None    # Y1/U1 over the cycles used
    static_gain: float | None       # ∫y/∫u over the cycles used, biased relay only
    t_start_s: float | None = None  # first and last boundary of the cycles used
    t_end_s: float | None = None
    relay_amplitude: float | None = None  # the relay settings, for the record
    hysteresis: float | None = None
    bias: float | None = None
    period_stderr: float | None = None      # period_scatter/√cycles: precision of period_s
    amplitude_stderr: float | None = None
    convergence: CycleCheck | None = None   # per-series scatter, drift and allowance


def rising_switches(relay, *, level: float = 0.0) -> np.ndarray:
    """Indices k with relay[k] > level and relay[k-1] <= level."""
    r = np.asarray(relay, dtype=float)
    above = r > level
    return np.nonzero(above[1:] & ~above[:-1])[0] + 1


def _held_fourier(t: np.ndarray, u: np.ndarray, omega: float) -> complex:
    """∫ u(t) e^{-jωt} dt over [t[0], t[-1]] for u held at u[k] on [t[k], t[k+1])."""
    e = np.exp(-1j * omega * t)
    return complex(np.sum(u[:-1] * (e[:-1] - e[1:])) / (1j * omega))


def _sampled_fourier(t: np.ndarray, y: np.ndarray, omega: float) -> complex:
    """Trapezoid-rule ∫ y(t) e^{-jωt} dt over [t[0], t[-1]]."""
    f = y * np.exp(-1j * omega * t)
    return complex(np.sum(0.5 * (f[1:] + f[:-1]) * np.diff(t)))


def fundamental_ratio(t_s, u, y, *, n_periods: int,
                      phase_centre_deg: float = -180.0) -> FrequencyPoint:
    """Y1/U1 of the fundamental over a window holding exactly ``n_periods`` periods.

    The window is [t_s[0], t_s[-1]]; u is taken as held between samples, y as sampled.
    Means over the window are removed first.
    """
    t = np.asarray(t_s, dtype=float)
    u = np.asarray(u, dtype=float)
    y = np.asarray(y, dtype=float)
    span = t[-1] - t[0]
    omega = 2.0 * math.pi * n_periods / span
    u_mean = np.sum(u[:-1] * np.diff(t)) / span
    y_mean = np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(t)) / span
    t0 = t - t[0]
    u1 = _held_fourier(t0, u - u_mean, omega)
    y1 = _sampled_fourier(t0, y - y_mean, omega)
    return FrequencyPoint.from_complex(y1 / u1, omega, centre_deg=phase_centre_deg)


def _cycle_stats(t: np.ndarray, u: np.ndarray, y: np.ndarray, rises: np.ndarray):
    """Per-cycle period, half peak-to-peak of y and ∫y/∫u (the last for biased relays)."""
    periods = np.diff(t[rises])
    amps = np.empty(len(periods))
    gains = np.empty(len(periods))
    for i, (a, b) in enumerate(zip(rises[:-1], rises[1:])):
        seg = y[a:b + 1]
        amps[i] = 0.5 * (np.max(seg) - np.min(seg))
        int_u = np.sum(u[a:b] * np.diff(t[a:b + 1]))
        int_y = np.sum(0.5 * (seg[1:] + seg[:-1]) * np.diff(t[a:b + 1]))
        gains[i] = int_y / int_u if int_u != 0 else np.inf
    return periods, amps, gains


def _series(periods, amps, gains, biased: bool) -> dict:
    out = {"period": periods, "amplitude": amps}
    if biased:
        out["static gain"] = gains
    return out


def _sample_interval(t: np.ndarray) -> float:
    return float(np.median(np.diff(t))) if len(t) > 1 else 0.0


def analyse_relay(t_s, relay, u, y, *, amplitude: float, hysteresis: float = 0.0,
                  bias: float = 0.0, discard_cycles: int = 1, tol: float = 0.02,
                  min_cycles: int = 3, level: float = 0.0,
                  phase_centre_deg: float = -180.0, noise_sigmas: float = 3.0,
                  resolution_samples: float = 1.5, max_scatter: float = 0.25,
                  noise_cycles: int = 8) -> RelayResult:
    """Analyse a logged relay experiment (see the module docstring for conventions).

    ``amplitude`` is the relay's half step d (u = bias ± d). ``hysteresis`` is only
    recorded in the result: the exact point needs no correction for it.
    """
    t = np.asarray(t_s, dtype=float)
    r = np.asarray(relay, dtype=float)
    uu = np.asarray(u, dtype=float)
    yy = np.asarray(y, dtype=float)
    if not (len(t) == len(r) == len(uu) == len(yy)):
        raise ValueError("t_s, relay, u and y must have the same length")
    if amplitude <= 0:
        raise ValueError("amplitude must be positive")
    if hysteresis < 0 or discard_cycles < 0 or min_cycles < 1 or tol <= 0:
        raise ValueError("hysteresis, discard_cycles >= 0; min_cycles >= 1; tol > 0")
    if noise_sigmas < 0 or resolution_samples < 0 or max_scatter <= 0:
        raise ValueError("noise_sigmas, resolution_samples >= 0; max_scatter > 0")
    opts = dict(tol=tol, noise_sigmas=noise_sigmas, max_scatter=max_scatter,
                noise_cycles=noise_cycles)
    if np.any(np.diff(t) <= 0):
        raise ValueError("t_s must be strictly increasing")

    rises = rising_switches(r, level=level)
    n_cycles = max(len(rises) - 1, 0)
    usable = n_cycles - discard_cycles
    if usable < 1:
        return RelayResult(False, f"only {n_cycles} whole cycle(s) logged, "
                           f"{discard_cycles} discarded", 0, None, None, None, None,
                           None, None, None, None, None, None, amplitude, hysteresis, bias)
    rises = rises[discard_cycles:]
    periods, amps, gains = _cycle_stats(t, uu, yy, rises)
    series = _series(periods, amps, gains, bias != 0.0)
    need = max(min_cycles, 3)
    floors = {"period": resolution_samples * _sample_interval(t[rises[0]:rises[-1] + 1])}
    used, check = settled_cycles(series, min_cycles=need, floors=floors, **opts)
    if used:
        converged, reason = True, ""
    else:
        converged = False
        used = len(periods)
        if check is None:
            reason = (f"only {len(periods)} cycle(s) after discarding {discard_cycles}; "
                      f"need {need}")
        else:
            bad = [c.name for c in check.series if not c.ok]
            reason = (f"{' and '.join(bad)} not settled over the last {need} cycles "
                      f"(drift or scatter above the allowance, max scatter "
                      f"{100 * max_scatter:.3g}%): {check.describe()}")
        if used >= 3:  # the figures of all the cycles, which are the ones used
            check = check_cycles(series, floors=floors, **opts)
    rises = rises[len(rises) - 1 - used:]
    periods, amps = periods[-used:], amps[-used:]

    a, b = rises[0], rises[-1]
    tw, uw, yw = t[a:b + 1], uu[a:b + 1], yy[a:b + 1]
    point = fundamental_ratio(tw, uw, yw, n_periods=used, phase_centre_deg=phase_centre_deg)
    period = float((t[b] - t[a]) / used)
    amp = float(np.mean(amps))
    static_gain = None
    if bias != 0.0:
        int_u = float(np.sum(uw[:-1] * np.diff(tw)))
        int_y = float(np.sum(0.5 * (yw[1:] + yw[:-1]) * np.diff(tw)))
        static_gain = int_y / int_u if int_u != 0.0 else None
    ku = 4.0 * amplitude / (math.pi * amp) if amp > 0 else None
    p_check = check.get("period") if check is not None else None
    a_check = check.get("amplitude") if check is not None else None
    return RelayResult(converged, reason, used, period, _scatter(periods), amp,
                       _scatter(amps), ku, period, point, static_gain,
                       float(t[a]), float(t[b]), amplitude, hysteresis, bias,
                       p_check.stderr if p_check else None,
                       a_check.stderr if a_check else None, check)


def _scatter(x: np.ndarray) -> float:
    """Relative sample standard deviation (0 for a single value)."""
    return float(np.std(x, ddof=1) / np.mean(np.abs(x))) if len(x) > 1 else 0.0


@dataclass(frozen=True)
class RelayProgress:
    """Live view of a relay experiment: whole cycles so far and the latest estimates."""

    cycles: int
    period_s: float | None         # last whole cycle
    amplitude: float | None        # last whole cycle, half peak-to-peak of y
    ku: float | None               # 4·d/(π·a) from the last cycle
    static_gain: float | None      # ∫y/∫u over the last cycle (biased relay only)
    period_change: float | None    # relative change from the previous cycle
    amplitude_change: float | None
    settled: bool                  # analyse_relay's test on the last min_cycles cycles
    period_scatter: float | None = None     # relative, over the last min_cycles cycles
    amplitude_scatter: float | None = None
    convergence: CycleCheck | None = None   # that test's figures per series


class RelayTracker:
    """Incremental cycle counter for live progress; feed chunks with :meth:`feed`.

    Per-cycle figures are computed as chunks arrive (a chunk may end anywhere, even in the
    middle of a cycle). Samples are kept (up to ``max_samples``; older ones are dropped,
    cycles already counted stay counted) so :meth:`result` can run :func:`analyse_relay`
    on the record at the end with the same options.
    """

    def __init__(self, *, amplitude: float, hysteresis: float = 0.0, bias: float = 0.0,
                 discard_cycles: int = 1, tol: float = 0.02, min_cycles: int = 3,
                 level: float = 0.0, noise_sigmas: float = 3.0,
                 resolution_samples: float = 1.5, max_scatter: float = 0.25,
                 noise_cycles: int = 8, max_samples: int = 2_000_000):
        if amplitude <= 0:
            raise ValueError("amplitude must be positive")
        self._opts = dict(amplitude=amplitude, hysteresis=hysteresis, bias=bias,
                          discard_cycles=discard_cycles, tol=tol, min_cycles=min_cycles,
                          level=level, noise_sigmas=noise_sigmas,
                          resolution_samples=resolution_samples, max_scatter=max_scatter,
                          noise_cycles=noise_cycles)
        self._dt_s = 0.0   # sample interval (median of the latest chunk)
        self._max = int(max_samples)
        self._chunks: list[np.ndarray] = []
        self._n = 0
        self._last: tuple[float, bool, float, float] | None = None  # t, above, u, y
        self._rise_t: float | None = None
        self._ymax = -math.inf
        self._ymin = math.inf
        self._int_u = 0.0
        self._int_y = 0.0
        self.periods: list[float] = []
        self.amplitudes: list[float] = []
        self.static_gains: list[float] = []

    def feed(self, t_s, relay, u, y) -> RelayProgress:
        t = np.atleast_1d(np.asarray(t_s, dtype=float))
        r = np.atleast_1d(np.asarray(relay, dtype=float))
        uu = np.atleast_1d(np.asarray(u, dtype=float))
        yy = np.atleast_1d(np.asarray(y, dtype=float))
        if not (len(t) == len(r) == len(uu) == len(yy)):
            raise ValueError("chunk arrays must have the same length")
        steps = np.diff(t if self._last is None else np.r_[self._last[0], t])
        if len(steps):
            self._dt_s = float(np.median(steps))
        for k in range(len(t)):  # per sample: chunks are small and this is bookkeeping
            self._step(float(t[k]), bool(r[k] > self._opts["level"]), float(uu[k]),
                       float(yy[k]))
        if len(t):
            self._chunks.append(np.vstack([t, r, uu, yy]))
            self._n += len(t)
            while self._n > self._max and len(self._chunks) > 1:
                self._n -= self._chunks.pop(0).shape[1]
        return self.progress()

    def _step(self, t: float, above: bool, u: float, y: float) -> None:
        if self._last is not None:
            t0, above0, u0, y0 = self._last
            if self._rise_t is not None:
                self._int_u += u0 * (t - t0)
                self._int_y += 0.5 * (y0 + y) * (t - t0)
            if above and not above0:
                if self._rise_t is not None:
                    self.periods.append(t - self._rise_t)
                    self.amplitudes.append(0.5 * (max(self._ymax, y) - min(self._ymin, y)))
                    self.static_gains.append(self._int_y / self._int_u
                                             if self._int_u else math.inf)
                self._rise_t = t
                self._ymax = self._ymin = y
                self._int_u = self._int_y = 0.0
        self._ymax = max(self._ymax, y)
        self._ymin = min(self._ymin, y)
        self._last = (t, above, u, y)

    def progress(self) -> RelayProgress:
        n = len(self.periods)
        if n == 0:
            return RelayProgress(0, None, None, None, None, None, None, False)
        o = self._opts
        p, a = self.periods[-1], self.amplitudes[-1]
        biased = o["bias"] != 0.0
        ku = 4.0 * o["amplitude"] / (math.pi * a) if a > 0 else None
        dp = abs(p - self.periods[-2]) / p if n > 1 else None
        da = abs(a - self.amplitudes[-2]) / a if n > 1 and a > 0 else None
        need = max(o["min_cycles"], 3)
        check = None
        kept = n - o["discard_cycles"]
        if kept >= need:
            series = _series(self.periods[-kept:], self.amplitudes[-kept:],
                             self.static_gains[-kept:], biased)
            check = check_cycles(series, window=need, tol=o["tol"],
                                 noise_sigmas=o["noise_sigmas"],
                                 noise_cycles=o["noise_cycles"], max_scatter=o["max_scatter"],
                                 floors={"period": o["resolution_samples"] * self._dt_s})
        gain = self.static_gains[-1] if biased else None
        pc = check.get("period") if check else None
        ac = check.get("amplitude") if check else None
        return RelayProgress(n, p, a, ku, gain, dp, da, bool(check and check.settled),
                             pc.scatter if pc else None, ac.scatter if ac else None, check)

    def result(self) -> RelayResult:
        """Full analysis of the samples kept so far."""
        if not self._chunks:
            return analyse_relay([], [], [], [], **self._opts)
        data = np.hstack(self._chunks)
        return analyse_relay(data[0], data[1], data[2], data[3], **self._opts)
