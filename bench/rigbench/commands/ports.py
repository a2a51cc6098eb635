"""``rigbench ports``: the serial ports this computer has, with their descriptions.
"""

from __future__ import annotations

from rigbench.link.ports import list_ports
from rigbench.commands._common import add_json_option, print_json, table

HINT = ("plug the board in (a charge-only USB cable shows nothing), check `dmesg` on Linux, "
        "or use --port sim://balance for the simulated board. Pseudo-terminals "
        "(rigbench sim) are not listed")


def add_parser(subparsers):
    p = subparsers.add_parser("ports", help="list serial ports with their descriptions",
                              description="List serial ports with their descriptions.")
    add_json_option(p)
    return p


def run(args) -> int:
    found = [{"device": p.device, "description": p.description, "hwid": p.hwid}
             for p in list_ports()]
    if args.json:
        print_json({"ports": found, "hint": None if found else HINT})
        return 0
    if not found:
        print(f"none found: {HINT}")
        return 0
    print(table([[f["device"], f["description"], f["hwid"]] for f in found], indent=""))
    return 0
