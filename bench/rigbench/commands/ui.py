"""``rigbench ui`` (and plain ``rigbench``): the terminal UI on one board.

Default port: the simulated balance rig in real time (``sim://balance``), marked SIMULATED
on every screen. Kill: ctrl+k or F9 on every screen. A software kill is not an emergency
stop: keep the hardware cut-off within reach.

Needs a terminal: with standard input or output not a terminal (a pipe, a file, a CI job)
it refuses at once with exit 2, before Textual writes any escape code. Imports Textual only
when the command runs, so the other commands start without it.
"""

from __future__ import annotations

import sys

from rigbench.base.stops import EXIT_USAGE
from rigbench.commands._common import CommandError, add_port_option, help_text


def add_parser(subparsers):
    p = subparsers.add_parser("ui", help="the terminal UI (default when no command is given)",
                              description=help_text(__doc__))
    add_port_option(p)
    p.add_argument("--stream-hz", type=float, default=250.0, metavar="HZ",
                   help="telemetry rate asked of the board for the live view (default 250; "
                        "the board picks the nearest rate it can produce)")
    p.add_argument("--theme", choices=("bench-dark", "bench-light"), default="bench-dark",
                   help="colour theme (default bench-dark)")
    return p


def make_app(args):
    """The app for these arguments, its theme applied by the app itself (after it has
    registered its themes)."""
    from rigbench.ui.app import RigApp

    return RigApp(args.port, stream_hz=args.stream_hz,
                  baudrate=getattr(args, "baud", None) or 115200, theme=args.theme)


def need_terminal(stdin=None, stdout=None) -> None:
    """CommandError (exit 2) unless both standard input and output are terminals."""
    stdin, stdout = stdin or sys.stdin, stdout or sys.stdout
    missing = [name for name, stream in (("input", stdin), ("output", stdout))
               if stream is None or not _isatty(stream)]
    if missing:
        raise CommandError(EXIT_USAGE, f"the terminal UI needs a terminal, and standard "
                           f"{' and '.join(missing)} {'is' if len(missing) == 1 else 'are'} "
                           "not one; for scripts use the commands (rigbench --help)")


def _isatty(stream) -> bool:
    try:
        return stream.isatty()
    except (AttributeError, ValueError):  # closed or not a file
        return False


def run(args) -> int:
    need_terminal()
    make_app(args).run()
    return 0
