"""``rigbench push PROFILE``: check a gain profile against the board, send it as one atomic
``set``, read it back, and with ``--persist`` save it and verify the stored image's CRC.

Refused profiles (unknown parameter, unit or range mismatch, read-only, wrong loop or rig,
board busy in a relay/open/inject mode) send nothing. Never arms or disarms.
"""

from __future__ import annotations

import json

from rigbench.commands.profile_io import (
    EXIT_CHECK, EXIT_OK, add_json, add_port, guarded, open_link, problem_dict, read_profile,
)
from rigbench.profiles.push import push_profile
from rigbench.profiles.diff import format_diff
from rigbench.wire.describe import format_value
from rigbench.commands._common import help_text

NAME = "push"


def add_parser(subparsers):
    p = subparsers.add_parser(NAME, help="check, send, read back (and save) a gain profile",
                              description=help_text(__doc__))
    p.add_argument("profile", metavar="PROFILE", help="gain profile YAML file, or - to read it from standard input")
    add_port(p)
    p.add_argument("--persist", action="store_true",
                   help="save to the board's non-volatile memory and verify the CRC")
    p.add_argument("--dry-run", action="store_true",
                   help="check and show the difference; send nothing")
    add_json(p)
    return p


def run(args) -> int:
    def body():
        profile = read_profile(args.profile)
        with open_link(args) as link:
            report = push_profile(link, profile, persist=args.persist, dry_run=args.dry_run)
            url, info = link.url, link.info
        if args.json:
            print(json.dumps(_as_json(report, url)))
        else:
            _print(report, url, info)
        return EXIT_OK if report.dry_run or report.ok else EXIT_CHECK
    return guarded(args, body)


def _as_json(r, url: str) -> dict:
    return {
        "ok": r.ok, "profile": r.profile.path, "port": url, "board": r.board,
        "loop": r.profile.loop, "dry_run": r.dry_run,
        "changes": [{"name": x.name, "unit": x.unit_a, "board": x.a, "profile": x.b,
                     "change": x.change} for x in r.rows],
        "warnings": [problem_dict(p) for p in r.warnings],
        "applied": r.applied, "readback": r.readback, "mismatches": list(r.mismatches),
        "reset": r.reset,
        "saved": None if r.save is None else {
            "count": r.save.count, "crc": f"{r.save.crc:04X}",
            "host_crc": f"{r.save.host_crc:04X}", "verified": r.save.verified},
    }


def _print(r, url: str, info) -> None:
    sim = ", simulated" if info.simulated else ""
    print(f"profile  {r.profile.path}  ({r.profile.name}; loop {r.profile.loop})")
    print(f"board    {info.board} ({info.rig}, firmware {info.firmware}{sim}) at {url}")
    for w in r.warnings:
        print(f"warning  {w.format(r.profile.path)}")
    print()
    print(format_diff(r.rows, a_label="board", b_label="profile"))
    print()
    if r.dry_run:
        changed = sum(1 for x in r.rows if x.change != "same")
        print(f"dry run: nothing sent ({changed} of {len(r.rows)} values would change)")
        return
    print(f"sent {len(r.applied)} values in one set")
    if r.mismatches:
        for n in r.mismatches:
            print(f"MISMATCH {n}: profile {format_value(r.profile.values()[n])}, "
                  f"board reads back {format_value(r.readback[n])}")
    else:
        print("read back: every value matches (7 significant digits)")
    if r.reset:
        print(f"BOARD RESET? {r.reset}; check the values before running the rig")
    if r.save is not None:
        if r.save.verified:
            print(f"saved: count={r.save.count} crc={r.save.crc:04X} (matches the values "
                  "read back)")
        else:
            print(f"SAVE NOT VERIFIED: board reports count={r.save.count} "
                  f"crc={r.save.crc:04X}; values read back give count={r.save.expected_count} "
                  f"crc={r.save.host_crc:04X}")
