"""``rigbench tune --loop NAME``: relay test on a loop, then gain proposals with margins
predicted on the identified model, in the board's units.

The relay runs as the board declares for the loop (on the output for stable and
integrating loops; on the integral channel, with the stabilising controller in charge,
for unstable ones), with the amplitude and hysteresis sized from the noise unless given.
Guards stop it (and kill the motor) near the board's trip limits, on stale telemetry or a
lost link; at the end the motor is off, or back in the closed loop it was found in.

Exit codes: 0 converged and at least one proposal recommended; 3 link; 4 the board
refused (e.g. to arm: its interlock reasons are printed); 5 a guard or the board tripped
(motor killed); 6 no sustained cycle formed, or nothing recommended (no proposal meets the
margin limits and the board's ranges); 130 interrupted (the rig is left safe first).

"""

from __future__ import annotations

import json
import math
from pathlib import Path

from rigbench.base.stops import exit_code_for, EXIT_CHECK, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_LINK, EXIT_OK, EXIT_TRIP, EXIT_USAGE  # noqa: F401
from rigbench.base.atomic import write_text_atomic
from rigbench.commands._common import CommandError, help_text
from rigbench.tuning.margin_result import gain_margin_text
# the experiments (and scipy with them) are imported inside the functions that run them, so
# loading this module to build the command line stays light (tests/test_cli_imports.py)

from rigbench.commands._signals import kill_on_signal
from rigbench.commands._common import add_json_option, add_port_option, open_link, plain, print_json, table
from rigbench.commands._confirm import add_yes_option, confirm_motion
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
                   help="relay hysteresis in the measure's units (default 2x noise RMS; "
                        "5x until the first cycle; wider when the cycle is shorter than 25 "
                        "samples, and the output says why)")
    p.add_argument("--bias", type=float, default=0.0, metavar="X",
                   help="relay bias; a biased relay also measures the static gain")
    p.add_argument("--cycles", type=int, default=4, metavar="N",
                   help="agreeing cycles needed for convergence (default 4)")
    p.add_argument("--max-seconds", type=float, default=None, metavar="S",
                   help="cap the relay at S seconds (default: no cap; the wait is counted "
                        "in the cycle's own periods, 24 periods for convergence)")
    p.add_argument("--gm-min", type=float, default=2.0, metavar="X",
                   help="recommend only with a gain margin >= X (ratio; default 2 = 6 dB)")
    p.add_argument("--pm-min", type=float, default=30.0, metavar="DEG",
                   help="recommend only with a phase margin >= DEG (default 30)")
    p.add_argument("--ms-max", type=float, default=2.0, metavar="X",
                   help="recommend only with a peak sensitivity Ms <= X (default 2)")
    p.add_argument("--gm-lower-max", type=float, default=0.5, metavar="X",
                   help="open-loop unstable loops: recommend only with a lower gain margin "
                        "<= X (default 0.5)")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="write the recording, tune.json and tune.md into DIR")
    p.add_argument("--save-profile", default=None, metavar="FILE",
                   help="write the chosen proposal as a gain profile (every loop it sets, "
                        "complete, with its predicted margins), ready for rigbench push")
    p.add_argument("--rule", default=None, metavar="ID",
                   help="the proposal --save-profile writes (default: the first recommended)")
    add_yes_option(p)
    add_json_option(p)
    return p


def tune_document(result, *, simulated: bool | None = None) -> dict:
    """The ``--json`` object (rigbench.experiments.autotunedoc)."""
    return result.to_dict(simulated=simulated)


def _num(x, fmt=".4g") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    return format(x, fmt)




def _row(it: dict, lower: bool) -> list:
    """One table row. '?' = not computed (the reason is listed), 'none' = no such margin,
    'inf' = no limit; an unstable row shows no phase margin."""
    m, resp = it["margins"], it["response"] or {}
    rank = "now" if it["rule"] == "current" else (str(it["rank"]) if it["rank"] else "no")
    if m is None:
        cells = ["?", "?", "?", "?"] if lower else ["?", "?", "?"]
    elif not m["stable"]:
        cells = ["UNSTABLE", "", "", ""] if lower else ["UNSTABLE", "", ""]
    else:
        pm = _num(m["phase_margin_deg"], ".1f") if m["phase_margin_deg"] is not None else "none"
        if it.get("target_margin_deg"):
            pm += f" ({it['target_margin_deg']:g})"
        why = m.get("reasons") or {}
        cells = [gain_margin_text(m["gain_margin"], why.get("gain_margin_upper", ""))]
        if lower:
            cells.append(gain_margin_text(m["gain_margin_lower"],
                                          why.get("gain_margin_lower", "")))
        cells += [pm, _num(m["ms"], ".3g")]
    return ([rank, it["rule"], _num(it["kp"]), _num(it["ki"]), _num(it["kd"])] + cells
            + [_num(resp.get("iae"), ".3g")])


def tune_text(doc: dict) -> str:
    """The human summary of a tune document."""
    where = "integral channel" if doc["relay_kind"] == "integral" else "output"
    lines = [f"loop {doc['loop']} ({doc['plant']}, relay on the {where}) on "
             f"{doc['board']}" + (" [SIMULATED]" if doc.get("simulated") else "")]
    r, o, p = doc["relay"], doc["oscillation"], doc["point"]
    if r:
        ratio = r.get("hysteresis_noise_ratio")
        lines.append(f"relay: amplitude {r['amplitude']:.4g} {r['amplitude_unit']}, hysteresis "
                     f"{r['hysteresis']:.3g} {r['hysteresis_unit']}"
                     + (f" ({ratio:.3g}x noise RMS)" if ratio else "")
                     + f", bias {r['bias']:g}; noise RMS {_num(doc['noise_rms'], '.3g')}")
        if r.get("hysteresis_reason"):
            lines.append(f"  hysteresis {r['hysteresis_reason']}")
        for a in r.get("attempts") or []:
            osc = "no whole cycle" if a["oscillation"] is None else (
                f"oscillation {a['oscillation']:.3g}, period {a['period_s']:.3g} s")
            lines.append(f"  tried amplitude {a['amplitude']:.4g}, band {a['hysteresis']:.3g}: "
                         f"{osc} -> {a['outcome']}")
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
                     f"{_num(doc['tu_s'])} s (describing function)")
    if doc.get("model"):
        lines.append(f"model ({doc['model']['kind']}): {doc['model']['text']}")
    if doc.get("model_missing"):
        lines.append(f"no model: {doc['model_missing']}")
    u = doc.get("ultimate") or {}
    if u.get("ku"):
        lines.append(f"rules use Ku {u['ku']:.4g}, Tu {u['tu_s']:.4g} s from the {u['source']}")
    if doc["proposals"]:
        units = doc["units"]["gains"]
        lim = doc.get("limits") or {}
        lower = doc["plant"] == "unstable" or doc["relay_kind"] == "integral"
        lines.append(f"proposals (kp [{units['kp']}], ki [{units['ki']}], kd [{units['kd']}]; "
                     "margins and IAE predicted on the model; GM as a ratio (dB); "
                     "? = not computed, none = no such margin, inf = no limit):")
        head = ["rank", "rule", "kp", "ki", "kd", "GM"] + (["GM low"] if lower else [])             + ["PM deg", "Ms", "IAE"]
        applied = [it for it in doc["proposals"] if it["applies"]]
        ranked = sorted((it for it in applied if it["rank"]), key=lambda it: it["rank"])
        rest = [it for it in applied if not it["rank"]]
        items = ([doc["current"]] if doc.get("current") else []) + ranked + rest
        lines.append(table([head] + [_row(it, lower) for it in items]))
        cur = doc.get("current")
        if cur and cur.get("margin_missing"):
            lines.append(f"  current gains: no margins: {cur['margin_missing']}")
        own = set(doc["gain_names"])
        for it in applied:
            more = {k: v for k, v in it["gains"].items() if k not in own}
            if more:
                lines.append(f"  {it['rule']} also sets " +
                             ", ".join(f"{k} = {v:.4g}" for k, v in more.items()))
        if rest:
            lines.append(f"not recommended (limits: GM >= {lim.get('gm_min', 2):g}, PM >= "
                         f"{lim.get('pm_min_deg', 30):g} deg, Ms <= {lim.get('ms_max', 2):g}"
                         + (f", lower GM <= {lim.get('gm_lower_max', 0.5):g}" if lower else "")
                         + ", gains within the board's ranges):")
            lines += [f"  {it['rule']}: " + "; ".join(it["not_recommended"]) for it in rest]
        if not ranked:
            lines.append("NOTHING RECOMMENDED: no proposal meets the limits (exit code 6)")
        skipped = [it for it in doc["proposals"] if not it["applies"]]
        if skipped:
            lines.append("does not apply:")
            lines += [f"  {it['rule']}: {it['reason']}" for it in skipped]
    for n in doc.get("notes", []):
        lines.append(f"note: {n}")
    if doc.get("proposals_error"):
        lines.append(doc["proposals_error"])
    return "\n".join(lines)


def _which_loop_text(link) -> str:
    """Usage error for a board with several loops (or none): the loops, and which one is
    usually tuned first."""
    text = "name the loop with --loop; the board has: " + (", ".join(link.loops) or "none")
    from rigbench.experiments.conventions import primary_loop
    choice = primary_loop(link.loops, {s.name: s.unit for s in link.signals})
    if choice.name is not None and not choice.ambiguous:
        text += f". Start with --loop {choice.name}: {choice.reason}"
    elif choice.ambiguous:
        text += f". {choice.reason[0].upper()}{choice.reason[1:]}"
    return text


def _save_profile(args, link, result, loop: str, out_dir) -> str:
    """Write the chosen proposal as a profile; the line to print (CommandError if none)."""
    from rigbench.profiles.model import profile_from_proposal, save_profile
    props = result.proposals.proposals if result.proposals is not None else []
    if args.rule:
        chosen = next((p for p in props if p.rule == args.rule and p.applies), None)
        if chosen is None:
            raise CommandError(EXIT_USAGE, f"--rule {args.rule}: no such proposal here; "
                               "proposals: " + ", ".join(p.rule for p in props if p.applies))
    else:
        rec = result.recommended
        if not rec:
            raise CommandError(EXIT_CHECK, "nothing recommended, so no profile was written; "
                               "choose one with --rule ID to write it all the same")
        chosen = rec[0]
    rec_path = result.run.experiment.recording if result.run.experiment else None
    prof = profile_from_proposal(link, chosen, loop=loop,
                                 experiment=None if rec_path is None else str(rec_path),
                                 notes=None if chosen.recommended else
                                 "NOT RECOMMENDED: " + "; ".join(chosen.not_recommended))
    save_profile(prof, args.save_profile)
    return (f"wrote {args.save_profile}: {chosen.rule} on {'+'.join(prof.loops)} "
            f"({'recommended' if chosen.recommended else 'not recommended'}); "
            f"push it with rigbench push {args.save_profile}")


def run(args) -> int:
    from rigbench.experiments.autotune import AutotuneConfig, autotune
    from rigbench.experiments.ranking import RankLimits
    from rigbench.experiments.relay import RelayConfig
    if (args.max_seconds is not None and args.max_seconds <= 0) or args.cycles < 1 \
            or args.margin <= 0 or args.margin >= 90:
        raise CommandError(EXIT_USAGE, "--max-seconds > 0, --cycles >= 1, 0 < --margin < 90")
    try:
        config = AutotuneConfig(
            relay=RelayConfig(amplitude=args.amplitude, hysteresis=args.hysteresis,
                              bias=args.bias, max_s=args.max_seconds, cycles=args.cycles),
            margin_deg=args.margin,
            limits=RankLimits(gm_min=args.gm_min, gm_lower_max=args.gm_lower_max,
                              pm_min_deg=args.pm_min, ms_max=args.ms_max))
    except ValueError as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
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
        confirm_motion(link, args, f"a relay test on loop {loop}")
        with experiment_run() as bar:
            result = autotune(link, loop, config, progress=bar, results_dir=out_dir)
        doc = tune_document(result, simulated=link.simulated)
        saved, save_error = None, None
        if args.save_profile:
            try:
                saved = _save_profile(args, link, result, loop, out_dir)
            except CommandError as exc:
                save_error = exc
        doc["saved_profile"] = args.save_profile if saved else None
    text = tune_text(doc) + (f"\n{saved}" if saved else "")
    if out_dir is not None:
        write_text_atomic(out_dir / "tune.json", json.dumps(plain(doc), indent=2) + "\n")
        write_text_atomic(out_dir / "tune.md", f"# rigbench tune\n\n```\n{text}\n```\n")
    if args.json:
        print_json(doc)
    else:
        print(text)
    if save_error is not None:
        raise save_error
    return result.exit_code
