"""``rigbench report DIR|RECORDING.csv``: a Markdown summary and PNG plots from a results
folder (``rigbench run``) or from one recording with its YAML sidecar.

The report itself: rigbench.reports.report.

The plots need matplotlib; without it the summary is still written, and the command says
how to add the plots (``pip install 'rigbench[plots]'``, or ``pipx inject rigbench
matplotlib`` for a pipx install) and exits 0. Exit 2 for a path that is neither a results
folder nor a readable recording.
"""

from __future__ import annotations

import sys

from rigbench.base.stops import EXIT_OK, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError, help_text

from rigbench.commands._common import add_json_option, print_json


def add_parser(subparsers):
    p = subparsers.add_parser("report", help="Markdown summary and PNG plots of a results "
                                             "folder or a recording",
                              description=help_text(__doc__))
    p.add_argument("path", metavar="DIR|RECORDING.csv",
                   help="results folder of rigbench run, or a recording's CSV file")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="where to write summary.md and the PNG files (default: the results "
                        "folder itself, or NAME-report/ beside a recording)")
    add_json_option(p)
    return p


def run(args) -> int:
    from rigbench.reports.report import ReportError, make_report

    try:
        report = make_report(args.path, out=args.out)
    except ReportError as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    except OSError as exc:
        raise CommandError(EXIT_USAGE, f"{exc.filename or args.path}: "
                                       f"{exc.strerror or exc}") from None
    if args.json:
        print_json({"ok": True, "source": str(report.source), "out": str(report.out),
                    "summary": str(report.summary_md), "notes": report.notes,
                    "plots_unavailable": report.plots_unavailable,
                    "plots": [{"file": p.path.name, "caption": p.caption, "kind": p.kind,
                               "recording": p.source} for p in report.plots]})
        return EXIT_OK
    print(f"summary  {report.summary_md}")
    for p in report.plots:
        print(f"plot     {p.path}  ({p.caption})")
    for n in report.notes:
        print(f"note     {n}")
    if report.plots_unavailable:
        print(f"rigbench report: {report.plots_unavailable}", file=sys.stderr)
    return EXIT_OK
