"""``rigbench run SEQUENCE``: run a scripted test sequence headless, with progress, and
write its results folder (recordings, summary.yaml, summary.md, and PNG plots when
matplotlib is installed).

``--dry-run`` checks the whole file (and every profile it pushes) and prints the steps in
run order with repeats unrolled; nothing is sent. Exit codes: 0 every step ran and every
check passed; 2 the file is bad (one line: FILE:LINE: field: message) or the results
folder cannot be used; 3 link; 4 the board refused a command or to arm; 5 a guard tripped,
a step ran over its timeout_s, or the board tripped (motor off); 6 a check failed or a step
could not produce its result; 130 interrupted. Whatever the outcome, the motor is off at
the end (rigbench.sequences.run).
"""

from __future__ import annotations

import sys

from rigbench.base.stops import exit_code_for, EXIT_CHECK, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_LINK, EXIT_OK, EXIT_REFUSED, EXIT_TRIP, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError, DEFAULT_PORT, help_text
from rigbench.sequences.file import load_sequence
from rigbench.sequences.results import summary_dict
from rigbench.sequences.steps import describe_step, format_value
from rigbench.base.yamlload import SchemaError

from rigbench.link import Link

from rigbench.commands._common import add_json_option, print_json
from rigbench.commands._signals import kill_on_signal



def add_parser(subparsers):
    p = subparsers.add_parser("run", help="run a scripted test sequence and write its results",
                              description=help_text(__doc__))
    p.add_argument("sequence", metavar="SEQUENCE",
                   help="sequence YAML file (a file, not -: it names profiles relative to its "
                        "own folder)")
    p.add_argument("--port", default=None, metavar="URL",
                   help="device path, pyserial URL or sim://... (default: the sequence's "
                        f"port:, else {DEFAULT_PORT})")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="results folder (default results/<name>-<timestamp>/ in the "
                        "sequence's project folder); must be new or empty")
    p.add_argument("--dry-run", action="store_true",
                   help="check the file and print the steps in run order; send nothing")
    p.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    add_json_option(p)
    return p


def exit_code(result) -> int:
    if result.stopped_by == "done":
        return EXIT_CHECK if result.checks_failed else EXIT_OK
    return exit_code_for(result.stopped_by)


def step_line(step, project, sequence_guards=None) -> str:
    """One expanded step (rigbench.sequences.steps.describe_step), its line in the file, and
    the guards in force when they differ from the sequence's."""
    text = f"{describe_step(step, project=project)}   (line {step.line})"
    if step.guards != sequence_guards:
        text += "  guards: " + ", ".join(f"{k} {format_value(v)}"
                                        for k, v in vars(step.guards).items() if v is not None)
    return text


def run(args) -> int:
    if args.sequence == "-":
        raise CommandError(EXIT_USAGE, "a sequence cannot be read from standard input: it names "
                           "its profiles relative to its own folder; give its file")
    # the runner pulls in the experiments and scipy: loaded only when a sequence runs, so
    # that loading this module to build the command line stays light
    from rigbench.sequences.run import (
        check_runnable, default_results_dir, prepare_results_dir, run_sequence,
    )

    try:
        seq = load_sequence(args.sequence)
        steps = check_runnable(seq)
    except SchemaError as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    except OSError as exc:
        raise CommandError(EXIT_USAGE, f"{args.sequence}: {exc.strerror or exc}") from None
    if args.dry_run:
        return _dry_run(args, seq, steps)
    port = args.port or seq.port or DEFAULT_PORT
    folder = args.out or default_results_dir(seq)
    try:
        folder = prepare_results_dir(folder, inside=None if args.out else seq.project)
    except OSError as exc:
        raise CommandError(EXIT_USAGE, f"results folder {exc.filename or folder}: "
                                       f"{exc.strerror or exc}") from None
    out = sys.stderr if args.json else sys.stdout
    print(f"running {seq.name!r} ({len(steps)} steps) on {port}; results in {folder}",
          file=out, flush=True)
    with Link.open(port) as link, kill_on_signal(link):
        if link.simulated:
            print("board: SIMULATED", file=out, flush=True)
        result = run_sequence(link, sequence=seq, results_dir=folder,
                              progress=_printer(out))
    plots = [] if args.no_plots else _plots(folder, out)
    code = exit_code(result)
    if args.json:
        doc = summary_dict(result)
        doc.update({"results_dir": str(folder), "exit": code, "plots": plots})
        print_json(doc)
    else:
        print(f"summary: {folder / 'summary.md'}")
    return code


_LONG = ("wait", "record", "relay", "sweep")  # steps whose start is worth a line


def _printer(out):
    def show(p) -> None:
        if p.state == "running" or (p.state == "start" and p.kind not in _LONG):
            return
        mark = {"start": "..", "ok": "ok", "passed": "ok", "failed": "!!", "end": "=="}
        print(f"[{p.done:>3}/{p.total}] {p.elapsed_s:8.2f} s {mark.get(p.state, '  ')} {p.text}",
              file=out, flush=True)
    return show


def _plots(folder, out) -> list[str]:
    from rigbench.reports.report import make_report

    report = make_report(folder)
    if report.plots_unavailable:
        print(f"plots: {report.plots_unavailable}", file=out)
        return []
    print(f"plots: {len(report.plots)} PNG files in {folder}", file=out)
    return [p.path.name for p in report.plots]


def _dry_run(args, seq, steps) -> int:
    if args.json:
        print_json({"ok": True, "name": seq.name, "sequence": str(seq.path),
                    "project": str(seq.project), "on_abort": seq.on_abort, "port": seq.port,
                    "rig": seq.rig, "steps": [_step_json(s, seq.project) for s in steps]})
        return EXIT_OK
    guards = ", ".join(f"{k} {format_value(v)}" for k, v in vars(seq.guards).items()
                       if v is not None)
    print(f"{seq.path}: valid; {seq.name!r}, {len(steps)} steps in run order, on abort: "
          f"{seq.on_abort}" + (f", for a {seq.rig!r} rig" if seq.rig else ""))
    print(f"guards: {guards} (a step's own guards are shown on its line)")
    for s in steps:
        print(step_line(s, seq.project, seq.guards))
    print("dry run: nothing sent")
    return EXIT_OK


def _step_json(step, project) -> dict:
    from rigbench.sequences.stepdata import step_settings

    return {"index": step.index, "kind": step.kind, "line": step.line,
            "bindings": dict(step.bindings),
            "settings": step_settings(step, project)}
