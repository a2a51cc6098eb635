"""``rigbench clear``: clear the board's latched fault (after a kill or a trip) and report
the motor state. Clearing never starts the motor: it leaves it off (PROTOCOL.md §7.3) and a
new deliberate ``arm`` is needed before anything moves. Check the rig first.
"""

from __future__ import annotations

from rigbench.base.stops import EXIT_CHECK, EXIT_LINK  # noqa: F401
from rigbench.commands._common import (
    CommandError, add_json_option, add_port_option, help_text, open_link, print_json,
)
from rigbench.link import LinkError


def add_parser(subparsers):
    p = subparsers.add_parser("clear", help="clear a latched fault (never starts the motor)",
                              description=help_text(__doc__))
    add_port_option(p)
    add_json_option(p)
    return p


def run(args) -> int:
    try:
        with open_link(args) as link:
            before = link.status()
            motor = link.clear() if before.motor == "tripped" else before.motor
            after = link.status()
    except LinkError as exc:
        raise CommandError(EXIT_LINK, f"{exc}; the fault was not cleared") from None
    cleared = before.motor == "tripped" and after.fault is None
    if args.json:
        print_json({"cleared": cleared, "fault_was": before.fault, "motor": after.motor,
                    "fault": after.fault, "port": args.port})
    elif before.motor != "tripped":
        print(f"{args.port}: no fault latched (motor {motor}); nothing to clear")
    elif cleared:
        print(f"{args.port}: fault {before.fault} cleared; motor {after.motor}. Arming needs "
              "a new deliberate arm.")
    if before.motor == "tripped" and not cleared:
        raise CommandError(EXIT_CHECK, f"board at {args.port} still reports fault "
                           f"{after.fault} (motor {after.motor}) after clear")
    return 0
