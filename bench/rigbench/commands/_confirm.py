"""Asking before a command moves the motor: the command-line side of the interlock prompt.

``tune`` and ``sweep`` arm the board and drive the motor. On a real board they say what will
move and ask on the terminal; ``--yes`` answers for a script. Without a terminal to ask on
and without ``--yes`` they refuse (exit 2) before anything is sent. A simulated board moves
no motor and is not asked about. A sequence file (``rigbench run``) is its own
confirmation: its steps say what moves, in order.
"""

from __future__ import annotations

import sys

from rigbench.base.stops import EXIT_USAGE
from rigbench.commands._common import CommandError

CUT_OFF = ("A software kill is not an emergency stop: keep the hardware cut-off that removes "
           "motor power within reach.")


def add_yes_option(parser) -> None:
    parser.add_argument("--yes", action="store_true",
                        help="do not ask before moving the motor of a real board (for "
                             "scripts; keep the hardware cut-off within reach)")


def confirm_motion(link, args, what: str, *, stdin=None, stderr=None) -> None:
    """Ask before ``what`` moves the motor of ``link``'s board; CommandError if not agreed."""
    if link.simulated or getattr(args, "yes", False):
        return
    stdin = sys.stdin if stdin is None else stdin
    stderr = sys.stderr if stderr is None else stderr
    board = link.info.board if link.info else link.url
    status = link.last_status
    why = ", ".join(status.why) if status is not None and status.why else ""
    print(f"{what} on board {board} ({link.url}): this arms the board and moves the motor.",
          file=stderr)
    if why:
        print(f"the board would refuse to arm now: {why}", file=stderr)
    print(CUT_OFF, file=stderr)
    if not (hasattr(stdin, "isatty") and stdin.isatty()):
        raise CommandError(EXIT_USAGE, "nothing sent: no terminal to ask on; give --yes to "
                                       "move the motor from a script")
    print("Type yes to start: ", end="", file=stderr, flush=True)
    answer = stdin.readline().strip().lower()
    if answer != "yes":
        raise CommandError(EXIT_USAGE, "nothing sent: not confirmed (the motor stays off)")
