"""``rigbench pull -o PROFILE``: the board's current gains of one loop (and its trip and arm
limits) written as a gain profile, atomically.

Must not import textual or rigbench.ui.
"""

from __future__ import annotations

import json
import os

from rigbench.commands.profile_io import (
    EXIT_OK, EXIT_USAGE, add_json, add_port, fail, guarded, open_link,
)
from rigbench.profiles.model import profile_from_board, save_profile

NAME = "pull"


def add_parser(subparsers):
    p = subparsers.add_parser(NAME, help="the board's gains as a profile",
                              description=__doc__.split("\n\n")[0])
    p.add_argument("-o", "--output", required=True, metavar="PROFILE",
                   help="profile file to write")
    p.add_argument("--loop", metavar="NAME",
                   help="loop whose gains to read (needed when the board has several)")
    p.add_argument("--param", action="append", default=[], metavar="NAME",
                   help="also include this parameter with the gains (repeatable)")
    p.add_argument("--name", help="the profile's name (default: loop and board)")
    p.add_argument("--force", action="store_true", help="replace an existing file")
    add_port(p)
    add_json(p)
    return p


def run(args) -> int:
    def body():
        if os.path.exists(args.output) and not args.force:
            return fail(args, EXIT_USAGE, f"{args.output} exists; give --force to replace it")
        with open_link(args) as link:
            loop = args.loop
            if loop is None:
                if len(link.loops) != 1:
                    return fail(args, EXIT_USAGE, "the board has loops "
                                f"{', '.join(link.loops)}: choose one with --loop")
                loop = next(iter(link.loops))
            if loop not in link.loops:
                return fail(args, EXIT_USAGE, f"the board has no loop {loop!r}; it has: "
                            f"{', '.join(link.loops)}")
            unknown = [n for n in args.param if n not in link.params]
            if unknown:
                return fail(args, EXIT_USAGE, f"the board has no parameter "
                            f"{', '.join(unknown)}")
            profile = profile_from_board(link, loop, name=args.name, extra=args.param)
        save_profile(profile, args.output)
        if args.json:
            print(json.dumps({"ok": True, "output": args.output, "loop": loop,
                              "board": profile.board, "values": profile.values()}))
        else:
            print(f"wrote {args.output}: loop {loop} of {profile.board}, "
                  f"{len(profile.gains)} gains and {len(profile.limits)} limits")
        return EXIT_OK
    return guarded(args, body)
