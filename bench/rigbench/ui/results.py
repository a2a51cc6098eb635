"""Experiment progress and results as lines of text for the screens: what a relay run
measured, the proposals with their predicted margins, a sweep's metrics per gain set.

Formatting only: every number comes from the domain result objects
(rigbench.experiments: RelayRun, ProposalSet, Rated, SweepResult; rigbench.tuning.margins.Margins).
"""

from __future__ import annotations

from rigbench.tuning.margin_result import gain_margin_text


def num(value, spec: str = ".4g", unit: str = "") -> str:
    if value is None:
        return "–"
    return f"{value:{spec}}" + (f" {unit}" if unit else "")




def margins_text(m, missing: str = "") -> str:
    """Predicted margins of one gain set, short. ``missing``: why there are none."""
    if m is None:
        return "not predicted" + (f": {missing}" if missing else "")
    if not m.stable:
        return "UNSTABLE on the model"  # no phase margin for an unstable loop
    low = (f", low {gain_margin_text(m.gain_margin_lower, m.reason('gain_margin_lower'))}"
           if m.gain_margin_lower is not None else "")
    pm = f"{m.phase_margin_deg:.0f}°" if m.phase_margin_deg is not None else "none"
    up = gain_margin_text(m.gain_margin_upper, m.reason("gain_margin_upper"))
    return f"GM {up}{low}  PM {pm}  Ms {m.ms:.2f}"


def cycle_row(progress) -> tuple[str, ...] | None:
    """One row of the live cycle table from a runner Progress with relay estimates."""
    est = progress.estimate or {}
    if "period_s" not in est:
        return None
    change = est.get("period_change")
    return (str(progress.cycles), num(est.get("period_s")), num(est.get("amplitude")),
            num(est.get("ku")), num(None if change is None else 100 * change, ".2g"))


def progress_text(p) -> str:
    parts = [f"{p.experiment}: {p.phase}", f"{p.elapsed_s:.1f} s"]
    if p.cycles_needed:
        parts.append(f"{p.cycles}/{p.cycles_needed}")
    if p.message:
        parts.append(p.message)
    return "  ".join(parts)


def relay_lines(outcome) -> list[str]:
    """What the relay test measured and how it ended."""
    run = outcome.run
    lines = [f"loop {run.loop.name}: " + ("converged" if run.converged
                                          else f"stopped: {run.stopped_by} ({run.reason})")]
    st = run.settings
    if st is not None:
        how = "sized automatically" if st.automatic else "as given"
        lines.append(f"relay amplitude {st.amplitude:.4g} ({how}), hysteresis "
                     f"{st.hysteresis:.3g} {run.loop.measure_unit}, bias {st.bias:.3g}")
        if st.hysteresis_reason:
            lines.append(f"hysteresis {st.hysteresis_reason}")
        grown = [a for a in st.attempts if a.outcome != "kept"]
        for a in grown:
            lines.append(f"tried amplitude {a.amplitude:.4g}: {a.outcome}")
    if run.noise_rms is not None:
        lines.append(f"noise RMS in quiet hold {run.noise_rms:.3g} {run.loop.measure_unit}")
    an = run.analysis
    if an is not None:
        lines.append(f"cycles used {an.cycles}  Tu {num(run.tu_s, '.4g', 's')}  "
                     f"Ku {num(run.ku)}  oscillation {num(an.amplitude)} "
                     f"{run.loop.measure_unit}")
        if run.point is not None:
            p = run.point
            lines.append(f"measured point: gain {p.gain:.4g}, phase {p.phase_deg:.1f}° at "
                         f"{p.omega_rad_s:.4g} rad/s")
    lines.append(f"rig time {run.rig_seconds:.1f} s")
    ps = outcome.proposals
    if ps is None:
        lines.append(outcome.proposal_error or "no proposals")
    else:
        best = ps.best()
        lines.append(f"model: {ps.model_text}" + (f" — {ps.model_missing}"
                                                  if ps.model_missing else ""))
        lines.append(f"{sum(1 for p in ps.proposals if p.applies)} proposals; best: "
                     + (f"{best.rule} ({margins_text(best.margins)})" if best else
                        "none recommended (no proposal meets the margin limits and the "
                        "board's ranges; reasons on the Gains screen)")
                     + ". Gains screen (3) to compare and push.")
    return lines


def proposal_rows(proposal_set) -> list[tuple[str, ...]]:
    """Rows of the proposals table: the current gains first, then by rank."""
    rows = []
    cur = proposal_set.current
    items = ([cur] if cur is not None else []) + sorted(
        proposal_set.proposals, key=lambda p: (p.rank is None, p.rank or 0))
    for p in items:
        label = "current gains" if p is cur else p.rule
        rank = "now" if p is cur else ("" if p.rank is None else str(p.rank))
        if p.applies:
            iae = getattr(p.response, "iae", None)
            why = "; ".join(p.not_recommended) if p is not cur else ""
            rows.append((rank if p is cur or p.rank is not None else "no", label, p.kind,
                         num(p.kp), num(p.ki), num(p.kd),
                         margins_text(p.margins, p.margin_missing), num(iae, ".3g"),
                         (why or p.notes)[:60]))
        else:
            rows.append((rank, label, p.kind, "", "", "", "", "", p.reason[:60]))
    return rows


def proposal_items(proposal_set) -> list:
    """The proposal objects in the same order as :func:`proposal_rows`."""
    cur = proposal_set.current
    return ([cur] if cur is not None else []) + sorted(
        proposal_set.proposals, key=lambda p: (p.rank is None, p.rank or 0))


def sweep_lines(result) -> list[str]:
    lines = [f"sweep on loop {result.loop}: {result.kind} at {result.at}, amplitudes "
             f"{', '.join(f'{a:g}' for a in result.amplitudes)}, {result.repeats} repeats; "
             f"ended: {result.stopped_by}" + (f" ({result.detail})" if result.detail else "")]
    for s in result.sets:
        state = "FELL" if s.fell else ("done" if s.completed else "incomplete")
        summary = s.summary or {}
        peak = summary.get("peak_abs_error")
        settle = summary.get("settling_time_s")
        lines.append(f"  {s.name:<24} {state:<10} mean IAE {num(s.mean_iae, '.3g')}  "
                     f"peak {num(getattr(peak, 'mean', None), '.3g')}  settling "
                     f"{num(getattr(settle, 'mean', None), '.3g', 's')}  "
                     f"{len(s.injections)} injections")
    if result.restored:
        lines.append(f"restored: {', '.join(f'{k}={v:g}' for k, v in result.restored.items())}")
    return lines
