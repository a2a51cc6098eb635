"""What the sequence runner keeps of each step: its settings, the metrics a ``check`` can
test, and the data a report plots (relay analysis, identified model and proposals with
their predicted margins, the pushes of a sweep with their metrics).

- ``relay_outcome(run)``: the ``relay.*`` metrics of a rigbench.experiments RelayRun and, when
  the test converged, the proposals of rigbench.experiments.proposals with the identified
  plant (board units: measure/output) so a report can draw its frequency response.
- ``push_record``: docs/METHODS.md §5 metrics of one push of a sweep, the same recipe as
  rigbench.experiments.sweep: the error is the measure minus the streamed set-point signal
  (or the measure alone) less its mean over the ``pre_s`` before the push; the settling
  band is ``band_noise`` × the error's noise RMS before the push; the rig fell when
  |measure| passed its guard.
- ``sweep_metrics``: the ``sweep.*`` metrics over the pushes of one sweep step. A push that
  never settled makes ``settling_s_mean`` and ``settling_s_max`` infinite.

Plain data only in the results (numbers, strings, lists, dicts), so it goes to YAML/JSON.
"""

from __future__ import annotations

import math
from dataclasses import asdict, fields, is_dataclass
from pathlib import Path

import numpy as np

from rigbench.experiments.autotune import evaluate
from rigbench.experiments.relay import noise_rms
from rigbench.tuning.metrics import disturbance_metrics

__all__ = ["step_settings", "settled_tracker", "relay_outcome", "push_record",
           "sweep_metrics"]

_BOOKKEEPING = {"kind", "index", "line", "where", "bindings", "profile", "steps"}


def step_settings(step, project: Path) -> dict:
    """A step's own fields as plain data (paths relative to the project folder)."""
    out = {}
    for f in fields(step):
        if f.name in _BOOKKEEPING:
            continue
        value = getattr(step, f.name)
        if value is None:
            continue
        if isinstance(value, Path):
            try:
                value = value.relative_to(project).as_posix()
            except ValueError:
                value = str(value)
        elif is_dataclass(value):
            value = {k: v for k, v in asdict(value).items() if v is not None}
        elif isinstance(value, tuple):
            value = list(value)
        elif isinstance(value, dict):
            value = dict(value)
        out[f.name] = value
    if step.kind == "push":
        out["profile_name"] = step.profile.name
    return out


class _Settled:
    """|signal| below ``below`` for ``for_s`` seconds, fed block by block."""

    def __init__(self, signals, settled) -> None:
        if settled.signal not in signals:
            raise ValueError(f"wait until settled: the board streams no {settled.signal!r} "
                             f"signal (it has {', '.join(signals)})")
        self.i = list(signals).index(settled.signal)
        self.below, self.for_s = settled.below, settled.for_s
        self.since: float | None = None
        self.last: float | None = None

    def feed(self, t_s, values) -> None:
        if not len(t_s):
            return
        out = np.flatnonzero(np.abs(values[:, self.i]) >= self.below)
        if len(out):
            k = out[-1] + 1
            self.since = float(t_s[k]) if k < len(t_s) else None
        elif self.since is None:
            self.since = float(t_s[0])
        self.last = float(t_s[-1])

    def done(self) -> bool:
        return self.since is not None and self.last - self.since >= self.for_s - 1e-9


def settled_tracker(signals, settled) -> _Settled:
    return _Settled(signals, settled)


# ---------------------------------------------------------------------------- relay


def _point(p) -> dict:
    return {"gain": p.gain, "phase_deg": p.phase_deg, "omega_rad_s": p.omega_rad_s}


def _rated(p) -> dict | None:
    if p is None:
        return None
    r = p.response
    return {"rule": p.rule, "kind": p.kind, "applies": p.applies, "reason": p.reason,
            "kp": p.kp, "ki": p.ki, "kd": p.kd, "gains": dict(p.gains), "rank": p.rank,
            "stable": p.predicted_stable,
            "state_feedback": "trim_loop" in p.details,
            "margins": None if p.margins is None else asdict(p.margins),
            "margin_missing": p.margin_missing, "recommended": p.recommended,
            "not_recommended": list(p.not_recommended), "nominal_only": p.nominal_only,
            "iae": None if r is None else r.iae,
            "peak": None if r is None else r.peak_abs_error}


def relay_outcome(run, *, config=None) -> tuple[dict, dict]:
    """(metrics, data) of a relay run; proposals (rigbench.experiments.autotune.evaluate,
    the flow the CLI and the UI use) only when it converged, else the reason."""
    an, ls, s = run.analysis, run.loop, run.settings
    point = run.point
    metrics = {
        "relay.period_s": None if an is None else an.period_s,
        "relay.amplitude": None if an is None else an.amplitude,
        "relay.cycles": None if an is None else an.cycles,
        "relay.period_scatter": None if an is None else an.period_scatter,
        "relay.ku": run.ku,
        "relay.gain": None if point is None else point.gain,
        "relay.phase_deg": None if point is None else point.phase_deg,
    }
    data = {
        "loop": {"name": ls.name, "measure": ls.measure, "output": ls.output,
                 "setpoint": ls.setpoint, "relay_signal": ls.relay_signal, "wheel": ls.wheel,
                 "relay": ls.relay, "plant": ls.plant, "measure_unit": ls.measure_unit,
                 "output_unit": ls.output_unit, "gains": list(ls.gains)},
        "stopped_by": run.stopped_by, "reason": run.reason,
        "settings": None if s is None else {
            "amplitude": s.amplitude, "hysteresis": s.hysteresis, "bias": s.bias,
            "centre": s.centre, "bound": s.bound},
        "analysis": None if an is None else {
            "converged": an.converged, "cycles": an.cycles, "period_s": an.period_s,
            "period_scatter": an.period_scatter, "amplitude": an.amplitude, "ku": an.ku,
            "static_gain": an.static_gain, "t_start_s": an.t_start_s, "t_end_s": an.t_end_s},
        "points": [_point(p) for p in run.points],
        "noise_rms": run.noise_rms, "operating_output": run.operating_output,
        "operating_measure": run.operating_measure,
        "h_s": None if run.board is None else run.board.dt_s, "tf_s": ls.dfilt_s,
    }
    result = evaluate(run, config)
    data["model_missing"] = result.model_missing
    data["recommended"] = [p.rule for p in result.recommended]
    if result.proposals is None:
        if run.converged:
            data["proposals_error"] = result.proposal_error
    else:
        ps = result.proposals
        plant = ps.plant
        data["model"] = {
            "kind": ps.model_kind, "text": ps.model_text,
            "num": None if plant is None else list(plant.num),
            "den": None if plant is None else list(plant.den),
            "delay_s": None if plant is None else plant.delay_s,
            "direct_acting": ps.direct_acting}
        data["ultimate"] = dict(ps.ultimate)
        data["proposals"] = [_rated(p) for p in ps.proposals]
        data["current"] = _rated(ps.current)
        data["notes"] = list(ps.notes)
    return metrics, data


# ---------------------------------------------------------------------------- sweep


def push_record(exp, ls, t0_s: float, amplitude: float, repeat: int, *, pre_s: float,
                band_noise: float = 3.0, band_min: float = 1e-9) -> dict:
    """Metrics of the push at ``t0_s`` from the experiment's data so far (see above)."""
    t, v = exp.data()
    sel = t >= t0_s - pre_s
    t, v = t[sel], v[sel]
    rec = {"amplitude": amplitude, "repeat": repeat + 1, "t0_s": t0_s}
    before = t < t0_s
    if before.sum() < 3 or (~before).sum() < 3:
        return {**rec, "iae": None, "peak": None, "settling_s": None, "fell": False}
    col = {n: v[:, i] for i, n in enumerate(exp.signals)}
    e = col[ls.measure] - (col[ls.setpoint] if ls.setpoint else 0.0)
    e = e - float(np.mean(e[before]))
    band = max(band_noise * noise_rms(e[before]), band_min)
    m = disturbance_metrics(t, e, band=band, wheel=col.get(ls.wheel) if ls.wheel else None,
                            command=col[ls.output], command_limit=ls.output_limit, t0_s=t0_s,
                            fall_threshold=exp.limits.get(ls.measure))
    return {**rec, "iae": m.iae, "peak": m.peak_abs_error, "peak_time_s": m.peak_time_s,
            "settling_s": m.settling_time_s, "band": band, "fell": bool(m.fell),
            "peak_wheel_change": m.peak_wheel_change}


def sweep_metrics(pushes: list, *, extra_fell: int = 0) -> dict:
    """The ``sweep.*`` metrics over one sweep's pushes."""
    done = [p for p in pushes if p.get("iae") is not None]
    iae = [p["iae"] for p in done]
    peak = [p["peak"] for p in done]
    settle = [p["settling_s"] for p in done]
    unsettled = any(x is None for x in settle)
    settled = [x for x in settle if x is not None]

    def mean(xs):
        return float(np.mean(xs)) if xs else None

    return {
        "sweep.iae_mean": mean(iae), "sweep.iae_max": max(iae) if iae else None,
        "sweep.peak_mean": mean(peak), "sweep.peak_max": max(peak) if peak else None,
        "sweep.settling_s_mean": math.inf if unsettled else mean(settled),
        "sweep.settling_s_max": math.inf if unsettled else (max(settled) if settled else None),
        "sweep.fell": sum(1 for p in pushes if p.get("fell")) + extra_fell,
    }
