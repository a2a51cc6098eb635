"""``rigbench pull -o PROFILE``: the board's current gains of one loop, or of several loops
that run together (``--loop tilt --loop trim``), with its trip and arm limits, written as a
gain profile, atomically.

``-o -`` writes the profile to standard output (the confirmation line then goes to standard
error; ``--json`` cannot share standard output with it).
"""

from __future__ import annotations

import json
import os
import sys

from rigbench.commands.profile_io import (
    EXIT_OK, EXIT_USAGE, STDIO, add_json, add_port, fail, guarded, open_link,
    write_profile_stdout,
)
from rigbench.profiles.model import profile_from_board, save_profile
from rigbench.commands._common import help_text

NAME = "pull"


def add_parser(subparsers):
    p = subparsers.add_parser(NAME, help="the board's gains as a profile",
                              description=help_text(__doc__))
    p.add_argument("-o", "--output", required=True, metavar="PROFILE",
                   help="profile file to write, or - for standard output")
    p.add_argument("--loop", action="append", default=[], metavar="NAME",
                   help="loop whose gains to read (needed when the board has several); "
                        "repeat it for a cascade, the tuned loop first")
    p.add_argument("--param", action="append", default=[], metavar="NAME",
                   help="also include this parameter with the gains (repeatable)")
    p.add_argument("--name", help="the profile's name (default: loop and board)")
    p.add_argument("--force", action="store_true", help="replace an existing file")
    add_port(p)
    add_json(p)
    return p


def run(args) -> int:
    def body():
        to_stdout = args.output == STDIO
        if to_stdout and args.json:
            return fail(args, EXIT_USAGE, "-o - and --json both write to standard output: "
                        "choose one")
        if not to_stdout and os.path.exists(args.output) and not args.force:
            return fail(args, EXIT_USAGE, f"{args.output} exists; give --force to replace it")
        with open_link(args) as link:
            chosen = list(dict.fromkeys(args.loop))
            if not chosen:
                if len(link.loops) != 1:
                    return fail(args, EXIT_USAGE, "the board has loops "
                                f"{', '.join(link.loops)}: choose one with --loop")
                chosen = [next(iter(link.loops))]
            for loop in chosen:
                if loop not in link.loops:
                    return fail(args, EXIT_USAGE, f"the board has no loop {loop!r}; it has: "
                                f"{', '.join(link.loops)}")
            loop = chosen[0]
            unknown = [n for n in args.param if n not in link.params]
            if unknown:
                return fail(args, EXIT_USAGE, f"the board has no parameter "
                            f"{', '.join(unknown)}")
            profile = profile_from_board(link, loop, also=chosen[1:], name=args.name,
                                         extra=args.param)
        if to_stdout:
            write_profile_stdout(profile)
            print(f"wrote the profile to standard output: loop {'+'.join(profile.loops)} of "
                  f"{profile.board}", file=sys.stderr)
            return EXIT_OK
        save_profile(profile, args.output)
        if args.json:
            print(json.dumps({"ok": True, "output": args.output, "loop": loop,
                              "loops": list(profile.loops),
                              "board": profile.board, "values": profile.values()}))
        else:
            print(f"wrote {args.output}: loop {'+'.join(profile.loops)} of {profile.board}, "
                  f"{len(profile.gains)} gains and {len(profile.limits)} limits")
        return EXIT_OK
    return guarded(args, body)
