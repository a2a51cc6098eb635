"""``rigbench ui`` (and plain ``rigbench``): the terminal UI on one board.

Default port: the simulated balance rig in real time (``sim://balance``), marked SIMULATED
on every screen. Kill: ctrl+k or F9 on every screen. A software kill is not an emergency
stop: keep the hardware cut-off within reach.

Imports Textual only when the command runs (rigbench.cli must not import it at load time).
"""

from __future__ import annotations

from rigbench.commands._common import add_port_option, help_text


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


def run(args) -> int:
    make_app(args).run()
    return 0
