"""The plain-data document of an autotune result (the ``tune --json`` object, a UI or
sequence record): the keys README.md documents for `tune --json`, plus details. Whenever something is missing
the document says why: ``model_missing``, a proposal's ``margin_missing`` and
``not_recommended``, ``proposals_error``."""

from __future__ import annotations

from dataclasses import asdict

__all__ = ["autotune_document", "margins_doc", "proposal_doc"]


def margins_doc(m) -> dict | None:
    if m is None:
        return None
    return {"stable": m.stable, "gain_margin": m.gain_margin_upper,
            "gain_margin_db": m.gain_margin_upper_db, "gain_margin_lower": m.gain_margin_lower,
            "gain_margin_lower_db": m.gain_margin_lower_db,
            "phase_margin_deg": m.phase_margin_deg, "crossover_rad_s": m.crossover_rad_s,
            "delay_margin_s": m.delay_margin_s, "ms": m.ms,
            "reasons": dict(getattr(m, "reasons", {}) or {})}


def _robust_doc(r) -> dict | None:
    if r is None:
        return None
    return {"stable": r.stable, "gain_margin": r.gain_margin_upper,
            "gain_margin_lower": r.gain_margin_lower, "phase_margin_deg": r.phase_margin_deg,
            "ms": r.ms, "corners": r.corners}


def proposal_doc(p, units: dict) -> dict | None:
    if p is None:
        return None
    r = p.response
    return {
        "rule": p.rule, "kind": p.kind, "applies": p.applies, "reason": p.reason,
        "kp": p.kp, "ki": p.ki, "kd": p.kd, "form": "parallel",
        "ideal": None if p.ideal is None else {"k": p.ideal.k, "ti_s": p.ideal.ti_s,
                                               "td_s": p.ideal.td_s},
        "units": units, "gains": dict(p.gains), "rank": p.rank,
        "recommended": p.recommended, "not_recommended": list(p.not_recommended),
        "nominal_only": p.nominal_only,
        "predicted_stable": p.predicted_stable, "margins": margins_doc(p.margins),
        "margins_worst_2sigma": _robust_doc(p.robust), "margin_missing": p.margin_missing,
        "target_margin_deg": p.details.get("target_margin_deg"),
        "response": None if r is None else {
            "iae": r.iae, "peak_abs_error": r.peak_abs_error,
            "settling_time_s": r.settling_time_s, "opposite_ratio": r.opposite_ratio},
        "source": p.source, "notes": p.notes,
    }


def _attempt_doc(a) -> dict:
    return {"amplitude": a.amplitude, "hysteresis": a.hysteresis, "period_s": a.period_s,
            "oscillation": a.oscillation, "outcome": a.outcome}


def autotune_document(result, *, simulated: bool | None = None) -> dict:
    run, ps = result.run, result.proposals
    ls, an, s = run.loop, run.analysis, run.settings
    units = dict(zip(("kp", "ki", "kd"), ls.gain_units))
    pt = run.point
    doc = {
        "loop": ls.name,
        "board": None if run.board is None else run.board.board, "simulated": simulated,
        "plant": ls.plant, "relay_kind": ls.relay,
        "converged": run.converged, "stopped_by": run.stopped_by, "reason": run.reason,
        "ku": run.ku, "tu_s": run.tu_s,
        "relay": None if s is None else {
            "amplitude": s.amplitude, "hysteresis": s.hysteresis, "bias": s.bias,
            "centre": s.centre, "bound": s.bound, "automatic": s.automatic,
            "hysteresis_noise_ratio": s.hysteresis_noise_ratio,
            "hysteresis_reason": s.hysteresis_reason,
            "attempts": [_attempt_doc(a) for a in s.attempts],
            "amplitude_unit": ls.output_unit if ls.relay == "output" else ls.measure_unit,
            "hysteresis_unit": ls.measure_unit},
        "oscillation": None if an is None else {
            "amplitude": an.amplitude, "period_s": an.period_s, "cycles": an.cycles,
            "period_scatter": an.period_scatter, "amplitude_scatter": an.amplitude_scatter,
            "unit": ls.measure_unit},
        "point": None if pt is None else {
            "gain": pt.gain, "phase_deg": pt.phase_deg, "omega_rad_s": pt.omega_rad_s,
            "unit": f"{ls.measure_unit} per {ls.output_unit}"},
        "points": [{"gain": p.gain, "phase_deg": p.phase_deg, "omega_rad_s": p.omega_rad_s}
                   for p in run.points],
        "static_gain": run.static_gain, "noise_rms": run.noise_rms,
        "rig_seconds": run.rig_seconds, "time_to_converge_s": run.relay_seconds,
        "recording": None if run.experiment is None or run.experiment.recording is None
        else str(run.experiment.recording),
        "units": {"measure": ls.measure_unit, "output": ls.output_unit, "gains": units},
        "gain_names": list(ls.gains),
        "ultimate": None if ps is None else dict(ps.ultimate),
        "model": None if ps is None else {"kind": ps.model_kind, "text": ps.model_text,
                                          "direct_acting": ps.direct_acting},
        "model_missing": result.model_missing,
        "model_static_gain_consistent": None if ps is None else ps.static_consistent,
        "limits": None if ps is None else asdict(ps.limits),
        "current": None if ps is None else proposal_doc(ps.current, units),
        "proposals": [] if ps is None else [proposal_doc(p, units) for p in ps.proposals],
        "recommended": [p.rule for p in result.recommended],
        "notes": [] if ps is None else list(ps.notes),
        "exit_code": result.exit_code,
    }
    if result.proposal_error:
        doc["proposals_error"] = result.proposal_error
    return doc
