"""``rigbench report DIR|RECORDING.csv``: a Markdown summary and PNG plots from a results
folder (``rigbench run``) or from one recording with its YAML sidecar (rigbench.reports.report).

Needs matplotlib (``pip install 'rigbench[plots]'``); without it the command says so and
exits 2. Exit 2 too for a path that is neither a results folder nor a readable recording.
"""

from __future__ import annotations

from rigbench.base.stops import EXIT_OK, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError

from rigbench.commands._common import add_json_option, print_json


def add_parser(subparsers):
    p = subparsers.add_parser("report", help="Markdown summary and PNG plots of a results "
                                             "folder or a recording",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("path", metavar="DIR|RECORDING.csv",
                   help="results folder of `rigbench run`, or a recording's CSV file")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="where to write summary.md and the PNG files (default: the results "
                        "folder itself, or NAME-report/ beside a recording)")
    add_json_option(p)
    return p


def run(args) -> int:
    from rigbench.reports.report import PlotsUnavailable, ReportError, make_report

    try:
        report = make_report(args.path, out=args.out)
    except PlotsUnavailable as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    except ReportError as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    except OSError as exc:
        raise CommandError(EXIT_USAGE, f"{exc.filename or args.path}: "
                                       f"{exc.strerror or exc}") from None
    if args.json:
        print_json({"ok": True, "source": str(report.source), "out": str(report.out),
                    "summary": str(report.summary_md), "notes": report.notes,
                    "plots": [{"file": p.path.name, "caption": p.caption, "kind": p.kind,
                               "recording": p.source} for p in report.plots]})
        return EXIT_OK
    print(f"summary  {report.summary_md}")
    for p in report.plots:
        print(f"plot     {p.path}  ({p.caption})")
    for n in report.notes:
        print(f"note     {n}")
    return EXIT_OK
