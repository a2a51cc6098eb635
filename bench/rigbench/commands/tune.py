"""``rigbench tune --loop NAME``: relay test on a loop, then gain proposals with margins
predicted on the identified model, in the board's units.

The relay runs as the board declares for the loop (on the output for stable and
integrating loops; on the integral channel, with the stabilising controller in charge,
for unstable ones), with the amplitude and hysteresis sized from the noise unless given.
Guards stop it (and kill the motor) near the board's trip limits, on stale telemetry or a
lost link; at the end the motor is off, or back in the closed loop it was found in.

Exit codes: 0 converged (proposals printed); 3 link; 4 the board refused (e.g. to arm:
its interlock reasons are printed); 5 a guard or the board tripped (motor killed); 6 no
sustained cycle formed; 130 interrupted (the rig is left safe first).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from rigbench.base.stops import exit_code_for, EXIT_CHECK, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_LINK, EXIT_OK, EXIT_TRIP, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError, help_text
from rigbench.experiments.conventions import primary_loop
from rigbench.experiments.proposals import propose
from rigbench.experiments.relay import run_relay

from rigbench.commands._signals import kill_on_signal
from rigbench.commands._common import add_json_option, add_port_option, open_link, plain, print_json, table
from rigbench.commands._progress import experiment_run



def add_parser(subparsers):
    p = subparsers.add_parser("tune", help="relay test on a loop and gain proposals",
                              description=help_text(__doc__))
    add_port_option(p)
    p.add_argument("--loop", default=None, metavar="NAME",
                   help="the loop to test; required when the board has more than one (a "
                        "relay test moves the motor, so none is picked for you): the error "
                        "then names the innermost loop of the cascade, the usual first to "
                        "tune")
    p.add_argument("--margin", type=float, default=45.0, metavar="DEG",
                   help="target phase margin of the one-point designs (default 45)")
    p.add_argument("--amplitude", type=float, default=None, metavar="X",
                   help="relay amplitude in the output's units (integral relays: the "
                        "measure's); default: sized from the noise")
    p.add_argument("--hysteresis", type=float, default=None, metavar="X",
                   help="relay hysteresis in the measure's units (default 2x noise RMS)")
    p.add_argument("--bias", type=float, default=0.0, metavar="X",
                   help="relay bias; a biased relay also measures the static gain")
    p.add_argument("--cycles", type=int, default=4, metavar="N",
                   help="agreeing cycles needed for convergence (default 4)")
    p.add_argument("--max-seconds", type=float, default=60.0, metavar="S",
                   help="give up when no sustained cycle forms within S seconds (default 60)")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="write the recording, tune.json and tune.md into DIR")
    add_json_option(p)
    return p


def _gm(m: dict, key: str, field: str) -> str:
    """A gain margin cell: the number; ∞ for an upper margin no phase crossover limits;
    '?' when it could not be computed; '–' otherwise (no lower limit, unstable loop)."""
    if m.get(key) is not None:
        return _num(m[key], ".3g")
    why = (m.get("reasons") or {}).get(field, "")
    if why.startswith("not computed"):
        return "?"
    return "∞" if why == "no phase crossover above 1" else "–"


def _margins_doc(m) -> dict | None:
    if m is None:
        return None
    return {"stable": m.stable, "gain_margin": m.gain_margin_upper,
            "gain_margin_db": m.gain_margin_upper_db, "gain_margin_lower": m.gain_margin_lower,
            "gain_margin_lower_db": m.gain_margin_lower_db,
            "phase_margin_deg": m.phase_margin_deg, "crossover_rad_s": m.crossover_rad_s,
            "delay_margin_s": m.delay_margin_s, "ms": m.ms, "reasons": dict(m.reasons)}


def _proposal_doc(p, units: dict) -> dict | None:
    if p is None:
        return None
    r = p.response
    return {
        "rule": p.rule, "kind": p.kind, "applies": p.applies, "reason": p.reason,
        "kp": p.kp, "ki": p.ki, "kd": p.kd, "form": "parallel",
        "ideal": None if p.ideal is None else {"k": p.ideal.k, "ti_s": p.ideal.ti_s,
                                               "td_s": p.ideal.td_s},
        "units": units, "gains": dict(p.gains), "rank": p.rank,
        "predicted_stable": p.predicted_stable, "margins": _margins_doc(p.margins),
        "target_margin_deg": p.details.get("target_margin_deg"),
        "response": None if r is None else {
            "iae": r.iae, "peak_abs_error": r.peak_abs_error,
            "settling_time_s": r.settling_time_s, "opposite_ratio": r.opposite_ratio},
        "source": p.source, "notes": p.notes,
    }


def tune_document(run, ps, *, simulated: bool | None = None, error: str | None = None) -> dict:
    """The ``--json`` object (DESIGN.md Decision 4 keys plus details)."""
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
        "current": None if ps is None else _proposal_doc(ps.current, units),
        "proposals": [] if ps is None else [_proposal_doc(p, units) for p in ps.proposals],
        "notes": [] if ps is None else list(ps.notes),
    }
    if error:
        doc["proposals_error"] = error
    return doc


def _num(x, fmt=".4g") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    return format(x, fmt)


def tune_text(doc: dict) -> str:
    """The human summary of a tune document."""
    where = "integral channel" if doc["relay_kind"] == "integral" else "output"
    lines = [f"loop {doc['loop']} ({doc['plant']}, relay on the {where}) on "
             f"{doc['board']}" + (" [SIMULATED]" if doc.get("simulated") else "")]
    r, o, p = doc["relay"], doc["oscillation"], doc["point"]
    if r:
        lines.append(f"relay: amplitude {r['amplitude']:.4g} {r['amplitude_unit']}, hysteresis "
                     f"{r['hysteresis']:.3g} {r['hysteresis_unit']}, bias {r['bias']:g}; noise "
                     f"RMS {_num(doc['noise_rms'], '.3g')}")
    if not doc["converged"]:
        lines.append(f"NOT CONVERGED ({doc['stopped_by']}): {doc['reason']}")
    if o and o["period_s"]:
        lines.append(f"oscillation: period {o['period_s']:.4g} s (scatter "
                     f"{100 * (o['period_scatter'] or 0):.2g}%), amplitude {o['amplitude']:.4g} "
                     f"{o['unit']}, {o['cycles']} cycles; {_num(doc['time_to_converge_s'], '.3g')}"
                     f" s to converge, {doc['rig_seconds']:.3g} s in all")
    if p:
        lines.append(f"point: |G| = {p['gain']:.4g} {p['unit']}, phase {p['phase_deg']:.2f} deg "
                     f"at {p['omega_rad_s']:.4g} rad/s;  Ku {_num(doc['ku'])}, Tu "
                     f"{_num(doc['tu_s'])} s")
    if doc.get("model"):
        lines.append(f"model ({doc['model']['kind']}): {doc['model']['text']}")
    if doc.get("ultimate") and doc["ultimate"].get("ku"):
        u = doc["ultimate"]
        lines.append(f"rules use Ku {u['ku']:.4g}, Tu {u['tu_s']:.4g} s from the {u['source']}")
    if doc["proposals"]:
        units = doc["units"]["gains"]
        lines.append(f"proposals (kp [{units['kp']}], ki [{units['ki']}], kd [{units['kd']}]; "
                     "margins and IAE predicted on the model):")
        rows = [["rank", "rule", "kp", "ki", "kd", "GM", "GM low", "PM deg", "Ms", "IAE"]]
        items = ([doc["current"]] if doc.get("current") else []) + doc["proposals"]
        for it in items:
            if not it["applies"]:
                continue
            m, resp = it["margins"] or {}, it["response"] or {}
            rank = "now" if it["rule"] == "current" else (
                str(it["rank"]) if it["rank"] else ("UNST" if it["predicted_stable"] is False
                                                    else "-"))
            pm = _num(m.get("phase_margin_deg"), ".1f")
            if it.get("target_margin_deg"):
                pm += f" ({it['target_margin_deg']:g})"
            rows.append([rank, it["rule"], _num(it["kp"]), _num(it["ki"]), _num(it["kd"]),
                         _gm(m, "gain_margin", "gain_margin_upper"),
                         _gm(m, "gain_margin_lower", "gain_margin_lower"),
                         pm, _num(m.get("ms"), ".3g"), _num(resp.get("iae"), ".3g")])
        lines.append(table(rows))
        own = set(doc["gain_names"])
        for it in doc["proposals"]:
            more = {k: v for k, v in it["gains"].items() if k not in own}
            if it["applies"] and more:
                lines.append(f"  {it['rule']} also sets " +
                             ", ".join(f"{k} = {v:.4g}" for k, v in more.items()))
        skipped = [it for it in doc["proposals"] if not it["applies"]]
        if skipped:
            lines.append("does not apply:")
            lines += [f"  {it['rule']}: {it['reason']}" for it in skipped]
    for n in doc.get("notes", []):
        lines.append(f"note: {n}")
    if doc.get("proposals_error"):
        lines.append(f"no proposals: {doc['proposals_error']}")
    return "\n".join(lines)


def _which_loop_text(link) -> str:
    """Usage error for a board with several loops (or none): the loops, and which one is
    usually tuned first."""
    text = "name the loop with --loop; the board has: " + (", ".join(link.loops) or "none")
    choice = primary_loop(link.loops, {s.name: s.unit for s in link.signals})
    if choice.name is not None and not choice.ambiguous:
        text += f". Start with --loop {choice.name}: {choice.reason}"
    elif choice.ambiguous:
        text += f". {choice.reason[0].upper()}{choice.reason[1:]}"
    return text


def run(args) -> int:
    if args.max_seconds <= 0 or args.cycles < 1 or args.margin <= 0 or args.margin >= 90:
        raise CommandError(EXIT_USAGE, "--max-seconds > 0, --cycles >= 1, 0 < --margin < 90")
    out_dir = None
    if args.out:
        out_dir = Path(args.out)
        try:
            out_dir.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise CommandError(EXIT_USAGE, f"--out {out_dir}: {exc.strerror or exc}") from None
    with open_link(args) as link, kill_on_signal(link):
        loop = args.loop
        if loop is None:
            if len(link.loops) != 1:
                raise CommandError(EXIT_USAGE, _which_loop_text(link))
            loop = next(iter(link.loops))
        if loop not in link.loops:
            raise CommandError(EXIT_USAGE, f"the board has no loop {loop!r}; it has: "
                               + ", ".join(link.loops))
        with experiment_run() as bar:
            relay = run_relay(link, loop, amplitude=args.amplitude,
                              hysteresis=args.hysteresis, bias=args.bias,
                              max_s=args.max_seconds, cycles=args.cycles, progress=bar,
                              results_dir=out_dir)
        ps, error = None, None
        if relay.converged:
            try:
                ps = propose(relay, margin_deg=args.margin)
            except (ValueError, ArithmeticError) as exc:
                error = str(exc)
        doc = tune_document(relay, ps, simulated=link.simulated, error=error)
    text = tune_text(doc)
    if out_dir is not None:
        (out_dir / "tune.json").write_text(json.dumps(plain(doc), indent=2) + "\n")
        (out_dir / "tune.md").write_text(f"# rigbench tune\n\n```\n{text}\n```\n")
    if args.json:
        print_json(doc)
    else:
        print(text)
    return exit_code_for(relay.stopped_by)

