"""``rigbench kill``: stop the motor from any terminal. When another rigbench program holds
the port (a tune, a sweep, the UI), it is asked over its local kill socket to send the kill
byte at once and confirm; otherwise the port is opened, the kill byte sent three times the
moment it opens, then the framed ``kill``, and the board must report its motor off or
tripped. A port held by a program that does not answer is reported: cut motor power.

A software kill is a stop, not an emergency stop: keep a hardware cut-off of motor power
within reach.
"""

from __future__ import annotations

import os

from rigbench.base.stops import EXIT_CHECK, EXIT_LINK  # noqa: F401
from rigbench.commands._common import CommandError, help_text
from rigbench.link import LinkError
from rigbench.link.killsock import request_kill

from rigbench.commands._common import add_json_option, add_port_option, open_link, print_json

NOTE = "a software kill is not an emergency stop: keep the hardware cut-off within reach"


def add_parser(subparsers):
    p = subparsers.add_parser("kill", help="send the kill and confirm the motor is off",
                              description=help_text(__doc__))
    add_port_option(p)
    add_json_option(p)
    return p


def run(args) -> int:
    if "://" not in args.port and os.name == "posix":
        answer = request_kill(args.port)
        if answer is not None:
            return _passed_on(args, answer)
    try:
        link = open_link(args, kill_first=True)
    except LinkError as exc:
        busy = "busy" in str(exc)
        hint = (" and did not answer a kill request (is it an older rigbench or another "
                "program?)" if busy else "")
        raise CommandError(EXIT_LINK, f"{exc}{hint}; the kill was NOT sent: if the motor "
                           "runs, cut its power now") from None
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
                    "port": args.port, "via": "port"})
    elif confirmed:
        print(f"kill sent to {args.port}: board reports motor {status.motor}"
              f" (fault {status.fault or 'none'}); clear the fault (`rigbench clear`) before "
              "arming again.")
        print(f"note: {NOTE}")
    if not confirmed:
        raise CommandError(EXIT_CHECK, f"board at {args.port} still reports motor "
                           f"{status.motor} after the kill: cut motor power now")
    return 0


def _passed_on(args, answer: dict) -> int:
    """The program holding the port sent the kill for us; report what it saw."""
    pid = answer.get("pid", "?")
    confirmed = bool(answer.get("confirmed"))
    if args.json:
        print_json({"confirmed": confirmed, "motor": answer.get("motor"), "port": args.port,
                    "via": f"process {pid}", "escalated": answer.get("escalated", False),
                    "steps": answer.get("steps", []),
                    "latency_board_s": answer.get("latency_board_s")})
    elif confirmed:
        print(f"kill sent to {args.port} by the program holding it (process {pid}): board "
              f"reports motor {answer.get('motor')}; clear the fault (`rigbench clear`) "
              "before arming again.")
        if answer.get("escalated"):
            print("WARNING: the kill bytes were not confirmed; the host escalated "
                  f"({', '.join(answer.get('steps', []))}): check the rig, cut motor power "
                  "if anything moves")
        print(f"note: {NOTE}")
    if not answer.get("sent"):
        raise CommandError(EXIT_LINK, f"the program holding {args.port} (process {pid}) "
                           f"could not send the kill ({answer.get('error', 'no answer')}): "
                           "cut motor power now")
    if not confirmed:
        raise CommandError(EXIT_CHECK, f"kill sent to {args.port} by process {pid}, but the "
                           "board did not confirm it: cut motor power now")
    return 0
