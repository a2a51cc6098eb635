"""``rigbench kill``: send the kill byte three times the moment the port opens, then the
framed ``kill``, and confirm that the board reports its motor off or tripped.

A software kill is a stop, not an emergency stop: keep a hardware cut-off of motor power
within reach.
"""

from __future__ import annotations

from rigbench.base.stops import EXIT_CHECK, EXIT_LINK  # noqa: F401
from rigbench.commands._common import CommandError
from rigbench.link import LinkError

from rigbench.commands._common import add_json_option, add_port_option, open_link, print_json

NOTE = "a software kill is not an emergency stop: keep the hardware cut-off within reach"


def add_parser(subparsers):
    p = subparsers.add_parser("kill", help="send the kill and confirm the motor is off",
                              description=__doc__.split("\n\n")[0])
    add_port_option(p)
    add_json_option(p)
    return p


def run(args) -> int:
    try:
        link = open_link(args, kill_first=True)
    except LinkError as exc:
        raise CommandError(EXIT_LINK, f"{exc}; the kill was NOT confirmed: if the motor "
                           "runs, cut its power") from None
    with link:
        try:
            link.kill(framed=True)
            status = link.status()
        except LinkError as exc:
            raise CommandError(EXIT_LINK, f"kill bytes sent to {args.port} but not confirmed: "
                               f"{exc}; if the motor runs, cut its power") from None
    confirmed = status.motor in ("off", "tripped")
    if args.json:
        print_json({"confirmed": confirmed, "motor": status.motor, "fault": status.fault,
                    "port": args.port})
    elif confirmed:
        print(f"kill sent to {args.port}: board reports motor {status.motor}"
              f" (fault {status.fault or 'none'}); clear the fault before arming again.")
        print(f"note: {NOTE}")
    if not confirmed:
        raise CommandError(EXIT_CHECK, f"board at {args.port} still reports motor "
                           f"{status.motor} after the kill: cut motor power now")
    return 0
