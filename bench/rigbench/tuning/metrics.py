"""Figures of merit for disturbance sweeps and step responses (docs/METHODS.md §5).

:func:`disturbance_metrics` — for a push with final value 0, where step percentages are
undefined: peak |e| and its time, the opposite-sign excursion after the peak relative to
the peak, settling time into an absolute band, IAE, ITAE, ISE, peak wheel-speed change
and wheel recovery time, total variation of the command, time at the command and wheel
limits, and whether the rig fell. Times are measured from ``t0_s`` (the push); only
samples at or after ``t0_s`` are used, except for the wheel baseline (mean of the wheel
samples before ``t0_s``, or the first sample at t0_s when there are none).

:func:`step_metrics` — python-control ``step_info`` conventions (python-control docs):
rise time 10–90% of the final value, settling time into ±2% of the final value (time of
the first sample after the last one outside the band), overshoot and undershoot in % of
the final value, peak = max |y| and its time; the response is taken to start from 0.

:func:`summarise` — mean, standard deviation, min and max per field over repeated runs
(booleans as the fraction True; None values skipped and counted).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

__all__ = ["DisturbanceMetrics", "disturbance_metrics", "StepMetrics", "step_metrics",
           "Spread", "summarise"]


@dataclass(frozen=True)
class DisturbanceMetrics:
    peak_abs_error: float
    peak_time_s: float
    opposite_ratio: float               # largest opposite-sign excursion after the peak / peak
    settling_time_s: float | None       # None: still outside the band at the end
    iae: float                          # ∫|e| dt
    itae: float                         # ∫(t − t0)|e| dt
    ise: float                          # ∫e² dt
    peak_wheel_change: float | None
    wheel_recovery_time_s: float | None  # from t0 until |Δw| stays within the recovery band
    command_total_variation: float | None
    time_at_command_limit_s: float | None
    time_at_wheel_limit_s: float | None
    fell: bool | None                   # None when no fall threshold was given


def _trapz(y: np.ndarray, t: np.ndarray) -> float:
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(t))) if len(t) > 1 else 0.0


def _settle(t: np.ndarray, outside: np.ndarray, t0: float) -> float | None:
    """Time from t0 to the first sample after the last one outside (0 if never out)."""
    idx = np.flatnonzero(outside)
    if len(idx) == 0:
        return 0.0
    if idx[-1] == len(t) - 1:
        return None
    return float(t[idx[-1] + 1] - t0)


def _time_at(t: np.ndarray, at: np.ndarray) -> float:
    """Total time at a limit: each sample counts until the next sample (last: median dt)."""
    if len(t) == 0:
        return 0.0
    dt = np.diff(t)
    widths = np.r_[dt, np.median(dt) if len(dt) else 0.0]
    return float(np.sum(widths[at]))


def disturbance_metrics(t_s, error, *, band: float, wheel=None, wheel_limit: float | None = None,
                        command=None, command_limit: float | None = None, t0_s: float = 0.0,
                        fall_threshold: float | None = None, limit_fraction: float = 0.99,
                        wheel_recovery_fraction: float = 0.1) -> DisturbanceMetrics:
    """Metrics of one disturbance response (see the module docstring).

    ``band`` is absolute (choose ≥ 3σ of the noise, docs/METHODS.md §5). A sample is "at a
    limit" when |value| ≥ limit_fraction·limit. The wheel has recovered when |w − w0|
    stays within wheel_recovery_fraction of its peak change. The rig fell when |error|
    exceeded ``fall_threshold``.
    """
    if band <= 0:
        raise ValueError("band must be positive")
    t_all = np.asarray(t_s, dtype=float)
    e_all = np.asarray(error, dtype=float)
    if t_all.shape != e_all.shape:
        raise ValueError("t_s and error must have the same length")
    sel = t_all >= t0_s
    if not sel.any():
        raise ValueError("no samples at or after t0_s")
    t, e = t_all[sel], e_all[sel]
    ae = np.abs(e)
    ip = int(np.argmax(ae))
    peak = float(ae[ip])
    after = e[ip:] * math.copysign(1.0, e[ip]) if peak > 0 else np.zeros(1)
    opposite = float(max(0.0, -after.min()) / peak) if peak > 0 else 0.0
    rel = t - t0_s

    peak_w = recovery = tv = at_cmd = at_wheel = None
    if wheel is not None:
        w_all = np.asarray(wheel, dtype=float)
        before = w_all[~sel]
        w0 = float(np.mean(before)) if len(before) else float(w_all[sel][0])
        dw = np.abs(w_all[sel] - w0)
        peak_w = float(dw.max())
        if peak_w > 0:
            recovery = _settle(t, dw > wheel_recovery_fraction * peak_w, t0_s)
        else:
            recovery = 0.0
        if wheel_limit is not None:
            at_wheel = _time_at(t, np.abs(w_all[sel]) >= limit_fraction * wheel_limit)
    if command is not None:
        u = np.asarray(command, dtype=float)[sel]
        tv = float(np.sum(np.abs(np.diff(u))))
        if command_limit is not None:
            at_cmd = _time_at(t, np.abs(u) >= limit_fraction * command_limit)
    fell = None if fall_threshold is None else bool(peak > fall_threshold)
    return DisturbanceMetrics(
        peak_abs_error=peak, peak_time_s=float(rel[ip]), opposite_ratio=opposite,
        settling_time_s=_settle(t, ae > band, t0_s), iae=_trapz(ae, t),
        itae=_trapz(rel * ae, t), ise=_trapz(e * e, t), peak_wheel_change=peak_w,
        wheel_recovery_time_s=recovery, command_total_variation=tv,
        time_at_command_limit_s=at_cmd, time_at_wheel_limit_s=at_wheel, fell=fell)


@dataclass(frozen=True)
class StepMetrics:
    rise_time_s: float | None
    settling_time_s: float | None
    settling_min: float | None
    settling_max: float | None
    overshoot_pct: float | None
    undershoot_pct: float | None
    peak: float
    peak_time_s: float
    final_value: float


def step_metrics(t_s, y, *, final_value: float | None = None, settling_band: float = 0.02,
                 rise_limits: tuple[float, float] = (0.1, 0.9)) -> StepMetrics:
    """Step-response figures with python-control ``step_info`` conventions.

    ``final_value`` defaults to the last sample. Times are as in ``t_s`` (python-control
    reports t_s values, so start the time axis at the step). Undefined figures (final
    value 0 or not finite) are None.
    """
    t = np.asarray(t_s, dtype=float)
    yy = np.asarray(y, dtype=float)
    yf = float(yy[-1]) if final_value is None else float(final_value)
    ip = int(np.argmax(np.abs(yy)))
    peak, tpeak = float(abs(yy[ip])), float(t[ip])
    if yf == 0 or not math.isfinite(yf):
        return StepMetrics(None, None, None, None, None, None, peak, tpeak, yf)
    sg = math.copysign(1.0, yf)
    lo = np.flatnonzero(sg * (yy - rise_limits[0] * yf) >= 0)
    hi = np.flatnonzero(sg * (yy - rise_limits[1] * yf) >= 0)
    rise = float(t[hi[0]] - t[lo[0]]) if len(lo) and len(hi) else None
    outside = np.flatnonzero(np.abs(yy / yf - 1.0) >= settling_band)
    settled = 0 if len(outside) == 0 else outside[-1] + 1
    settling = float(t[settled]) if settled < len(t) else None
    i_hi = hi[0] if len(hi) else len(yy) - 1
    s_min = min(float(yy[i_hi:].min()), yf)
    s_max = max(float(yy[i_hi:].max()), yf)
    dy = abs(float((sg * yy).max())) - abs(yf)
    overshoot = abs(100.0 * dy / yf) if dy > 0 else 0.0
    y_us = float(yy[int(np.argmin(sg * yy))])
    undershoot = -100.0 * y_us / yf if sg * y_us < 0 else 0.0
    return StepMetrics(rise, settling, s_min, s_max, overshoot, undershoot, peak, tpeak, yf)


@dataclass(frozen=True)
class Spread:
    mean: float | None
    std: float | None
    min: float | None
    max: float | None
    count: int          # values present (None values are skipped)


def summarise(metrics: list) -> dict[str, Spread]:
    """Mean and spread per field of a list of metric dataclasses of one type."""
    if not metrics:
        return {}
    kind = type(metrics[0])
    if any(type(m) is not kind for m in metrics):
        raise ValueError("summarise needs metrics of one type")
    out = {}
    for f in fields(kind):
        vals = [getattr(m, f.name) for m in metrics]
        vals = [float(v) for v in vals if v is not None]
        if not vals:
            out[f.name] = Spread(None, None, None, None, 0)
            continue
        arr = np.array(vals)
        out[f.name] = Spread(float(arr.mean()), float(arr.std(ddof=1)) if len(arr) > 1 else 0.0,
                             float(arr.min()), float(arr.max()), len(arr))
    return out
