"""``rigbench sweep --gains A.yaml [--gains B.yaml ...]``: push each gain set, hold, inject
disturbances at several amplitudes (repeated), and compare the docs/METHODS.md §5 metrics.

``--gains`` takes a gain profile file (checked against the board first: unknown
parameters, units, ranges) or inline values ``name=value,name=value`` (optionally
``label:name=value,...``); without ``--gains`` the board's current gains are swept. The
original values are restored at the end. Amplitudes are in N.m for ``--at body``, in the
measure's units for ``--at setpoint`` and the output's for ``--at output``.

Exit codes: 0 every set went through; 2 a bad --gains or option; 3 link; 4 the board
refused (e.g. to arm); 5 a set made the rig fall or a guard tripped (motor killed);
130 interrupted (the rig is left safe first).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

from rigbench.base.stops import exit_code_for, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_LINK, EXIT_OK, EXIT_TRIP, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError, help_text
from rigbench.profiles.model import SchemaError, check_against_board, load_profile

from rigbench.commands._signals import kill_on_signal
from rigbench.commands._common import add_json_option, add_port_option, open_link, plain, print_json, table
from rigbench.commands._confirm import add_yes_option, confirm_motion
from rigbench.commands._progress import experiment_run

if TYPE_CHECKING:
    from rigbench.experiments.sweep import GainSet

# rigbench.experiments.sweep (scipy, through the tuning modules) is imported where it is
# used, so that loading this module to build the command line stays light.

METRICS = ("iae", "peak_abs_error", "settling_time_s", "peak_wheel_change", "itae")


def add_parser(subparsers):
    p = subparsers.add_parser("sweep", help="disturbance sweep with metrics per gain set",
                              description=help_text(__doc__))
    add_port_option(p)
    p.add_argument("--gains", action="append", default=[], metavar="FILE|name=v,...",
                   help="a gain profile file, or inline values; repeat for more sets")
    p.add_argument("--baseline", default=None, metavar="PROFILE",
                   help="values for every parameter a set leaves out (default: the board's "
                        "values when the sweep starts; never the previous set's)")
    p.add_argument("--loop", default=None, metavar="NAME",
                   help="loop to inject on (default: the loop whose gains the sets change)")
    p.add_argument("--amplitudes", default="0.02,0.04", metavar="A,B,...",
                   help="injection amplitudes, comma separated (default 0.02,0.04)")
    p.add_argument("--repeats", type=int, default=3, metavar="N",
                   help="injections per amplitude (default 3; signs alternate)")
    p.add_argument("--kind", choices=("pulse", "step"), default="pulse")
    p.add_argument("--at", choices=("body", "setpoint", "output"), default="body")
    p.add_argument("--width", type=float, default=0.1, metavar="S",
                   help="pulse length (default 0.1 s)")
    p.add_argument("--settle", type=float, default=2.0, metavar="S",
                   help="recording after each injection and wait before the next (default 2)")
    p.add_argument("--rearm", action="store_true",
                   help="after a fall, clear the fault and go on with the next set once the "
                        "interlock allows arming (someone must stand the rig up)")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="write the recordings and sweep.json into DIR")
    add_yes_option(p)
    add_json_option(p)
    return p


def parse_inline(text: str) -> GainSet:
    """``[label:]name=value,name=value`` as a GainSet; ValueError on bad text."""
    from rigbench.experiments.sweep import GainSet

    label, _, body = text.rpartition(":") if ":" in text.split("=", 1)[0] else ("", "", text)
    values = {}
    for part in body.split(","):
        name, eq, value = part.strip().partition("=")
        if not eq or not name:
            raise ValueError(f"--gains {text!r}: expected name=value pairs")
        try:
            values[name.strip()] = float(value)
        except ValueError:
            raise ValueError(f"--gains {text!r}: {value!r} is not a number") from None
    return GainSet(label or body, values)


def _checked_profile(text: str, link):
    try:
        prof = load_profile(text)
    except SchemaError as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    except OSError as exc:
        raise CommandError(EXIT_USAGE, f"{text}: {exc.strerror or exc}") from None
    errors = [pr for pr in check_against_board(prof, link.params, link.loops, info=link.info)
              if pr.severity == "error"]
    if errors:
        raise CommandError(EXIT_USAGE, errors[0].format(text))
    return prof


def _load_sets(args, link) -> list[GainSet]:
    from rigbench.experiments.sweep import GainSet

    sets = []
    for text in args.gains:
        if "=" in text and not Path(text).exists():
            try:
                sets.append(parse_inline(text))
            except ValueError as exc:
                raise CommandError(EXIT_USAGE, str(exc)) from None
            continue
        prof = _checked_profile(text, link)
        sets.append(GainSet(prof.name, prof.values()))
    if not sets:
        loop = args.loop or next((n for n, lp in link.loops.items() if lp.plant == "unstable"),
                                 next(iter(link.loops)))
        if loop not in link.loops:
            raise CommandError(EXIT_USAGE, f"the board has no loop {loop!r}; it has: "
                                           f"{', '.join(link.loops) or 'none'}")
        sets.append(GainSet("current", link.get(*link.loops[loop].gains)))
    return sets


def _spread(s) -> dict:
    return {"mean": s.mean, "std": s.std, "min": s.min, "max": s.max, "count": s.count}


def sweep_document(sw) -> dict:
    return {
        "loop": sw.loop, "kind": sw.kind, "at": sw.at, "amplitudes": list(sw.amplitudes),
        "repeats": sw.repeats, "stopped_by": sw.stopped_by, "detail": sw.detail,
        "restored": dict(sw.restored),
        "recordings": [str(e.recording) for e in sw.experiments if e.recording is not None],
        "sets": [{
            "name": s.name, "values": s.values, "applied": s.applied, "fell": s.fell,
            "completed": s.completed, "detail": s.detail,
            "summary": {k: _spread(v) for k, v in s.summary.items()},
            "by_amplitude": {str(a): {k: _spread(v) for k, v in m.items()}
                             for a, m in s.by_amplitude.items()},
            "injections": [{"amplitude": j.amplitude, "repeat": j.repeat, "t0_s": j.t0_s,
                            "fell": j.fell, "detail": j.detail,
                            "metrics": None if j.metrics is None else
                            {k: getattr(j.metrics, k) for k in METRICS}}
                           for j in s.injections],
        } for s in sw.sets],
    }


def sweep_text(doc: dict) -> str:
    lines = [f"sweep on loop {doc['loop']}: {doc['kind']} at {doc['at']}, amplitudes "
             f"{', '.join(f'{a:g}' for a in doc['amplitudes'])}, {doc['repeats']} each"]
    rows = [["set", "amplitude", "n", "IAE mean", "IAE sd", "peak", "settling s", "wheel",
             "result"]]

    def num(x, fmt=".4g"):
        return "-" if x is None else format(x, fmt)

    for s in doc["sets"]:
        result = "FELL" if s["fell"] else ("ok" if s["completed"] else "not run")
        if not s["by_amplitude"]:
            rows.append([s["name"], "-", "0", "-", "-", "-", "-", "-", result])
        for amp, m in s["by_amplitude"].items():
            iae = m.get("iae", {})
            rows.append([s["name"], amp, str(iae.get("count", 0)), num(iae.get("mean")),
                         num(iae.get("std"), ".2g"), num(m["peak_abs_error"]["mean"]),
                         num(m["settling_time_s"]["mean"], ".3g"),
                         num(m["peak_wheel_change"]["mean"], ".3g"), result])
    lines.append(table(rows))
    if doc["stopped_by"] != "done":
        lines.append(f"stopped: {doc['stopped_by']}: {doc['detail']}")
    if doc["restored"]:
        lines.append("restored: " + ", ".join(f"{k} = {v:g}" for k, v in doc["restored"].items()))
    return "\n".join(lines)


def run(args) -> int:
    from rigbench.experiments.sweep import run_sweep

    try:
        amplitudes = tuple(float(a) for a in args.amplitudes.split(","))
    except ValueError:
        raise CommandError(EXIT_USAGE, f"--amplitudes {args.amplitudes!r}: give numbers "
                                       "separated by commas") from None
    if args.repeats < 1 or args.settle <= 0 or args.width <= 0 or min(amplitudes) <= 0:
        raise CommandError(EXIT_USAGE, "--repeats >= 1; --settle, --width and amplitudes > 0")
    out_dir = Path(args.out) if args.out else None
    if out_dir is not None:
        out_dir.mkdir(parents=True, exist_ok=True)
    with open_link(args) as link, kill_on_signal(link):
        sets = _load_sets(args, link)
        baseline = _checked_profile(args.baseline, link).values() if args.baseline else None
        confirm_motion(link, args, f"a disturbance sweep of {len(sets)} gain set(s)")
        with experiment_run() as bar:
            sw = run_sweep(link, sets, loop=args.loop, amplitudes=amplitudes,
                           repeats=args.repeats, kind=args.kind, at=args.at,
                           width_s=args.width, settle_s=args.settle,
                           rearm_after_fall=args.rearm, progress=bar, results_dir=out_dir,
                           baseline=baseline)
    doc = sweep_document(sw)
    if out_dir is not None:
        (out_dir / "sweep.json").write_text(json.dumps(plain(doc), indent=2) + "\n")
    if args.json:
        print_json(doc)
    else:
        print(sweep_text(doc))
    code = exit_code_for(sw.stopped_by)
    if code == EXIT_OK and any(s.fell for s in sw.sets):
        code = EXIT_TRIP
    return code
