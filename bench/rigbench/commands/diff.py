"""``rigbench diff A B``: two gain profiles side by side; either may be ``board``, the live
board's current values of the same parameters (read through ``--port``).
"""

from __future__ import annotations

import json

from rigbench.commands.profile_io import (
    EXIT_OK, EXIT_USAGE, STDIO, add_json, add_port, fail, guarded, open_link, read_profile,
)
from rigbench.profiles.diff import diff_profiles, format_diff
from rigbench.profiles.model import profile_from_board
from rigbench.commands._common import help_text

NAME = "diff"
BOARD = "board"


def add_parser(subparsers):
    p = subparsers.add_parser(NAME, help="two profiles (or a profile and the board) side by side",
                              description=help_text(__doc__))
    p.add_argument("a", metavar="A", help="profile file, 'board', or - for standard input")
    p.add_argument("b", metavar="B", help="profile file, 'board', or - for standard input")
    p.add_argument("--changes-only", action="store_true", help="hide unchanged values")
    add_port(p)
    add_json(p)
    return p


def run(args) -> int:
    def body():
        if args.a == BOARD and args.b == BOARD:
            return fail(args, EXIT_USAGE, "give at least one profile file")
        if args.a == STDIO and args.b == STDIO:
            return fail(args, EXIT_USAGE, "only one of A and B can be - (standard input)")
        a = None if args.a == BOARD else read_profile(args.a)
        b = None if args.b == BOARD else read_profile(args.b)
        if a is None or b is None:
            ref = a or b
            with open_link(args) as link:
                if ref.loop not in link.loops:
                    return fail(args, EXIT_USAGE, f"the board has no loop {ref.loop!r}; it has:"
                                f" {', '.join(link.loops)}")
                live = _board_profile(link, ref)
            a, b = (live, b) if a is None else (a, live)
        rows = diff_profiles(a, b)
        labels = (_label(args.a), _label(args.b))
        if args.json:
            print(json.dumps({"ok": True, "a": args.a, "b": args.b, "rows": [
                {"name": r.name, "a": r.a, "b": r.b, "unit_a": r.unit_a, "unit_b": r.unit_b,
                 "change": r.change} for r in rows]}))
        else:
            for label, p in zip(labels, (a, b)):
                print(f"{label}: {p.name} (rig {p.rig}, loop {p.loop})")
            print()
            print(format_diff(rows, a_label=labels[0], b_label=labels[1],
                              changes_only=args.changes_only))
        return EXIT_OK
    return guarded(args, body)


def _label(arg: str) -> str:
    if arg == STDIO:
        return "stdin"
    return "board" if arg == BOARD else arg.rsplit("/", 1)[-1].removesuffix(".yaml")


def _board_profile(link, ref):
    """The board's values of the parameters ``ref`` names (those the board has)."""
    gains = [n for n in ref.gains if n in link.params]
    limits = [n for n in ref.limits if n in link.params]
    return profile_from_board(link, ref.loop, extra=gains, limits=limits,
                              name=f"board {link.info.board} now")
