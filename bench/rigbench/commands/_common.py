"""Helpers shared by the subcommand modules: the ``--port`` and ``--json`` options, opening
a link with the right errors, JSON output.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys

from rigbench.base.jsonsafe import to_plain
from rigbench.link import Link

DEFAULT_PORT = "sim://balance"


class CommandError(Exception):
    """An expected failure of a command: ``message`` (one line) and an exit ``code``."""

    def __init__(self, code: int, message: str) -> None:
        super().__init__(message)
        self.code = code


def help_text(doc: str | None) -> str:
    """The first paragraph of a command module's docstring as plain words for ``--help``:
    no reST markup (double backquotes, roles), whitespace folded."""
    first = (doc or "").strip().split("\n\n")[0]
    first = re.sub(r":[a-z]+:`([^`]*)`", r"\1", first)
    return " ".join(first.replace("``", "").replace("`", "").split())


def add_port_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--port", default=DEFAULT_PORT, metavar="URL",
                        help="device path (/dev/ttyACM0, COM3), pyserial URL or sim://... "
                             f"(default {DEFAULT_PORT}, the simulated balance rig)")
    parser.add_argument("--baud", type=int, default=115200, metavar="N",
                        help="baud rate of a UART port (default 115200; USB CDC ignores it)")


def add_json_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object for scripts instead of text")


def open_link(args, **kwargs) -> Link:
    """Open ``args.port`` and handshake (LinkError on failure: exit code 3). When it closes,
    a link that lost or resent anything says so on stderr in one line."""
    link = Link.open(args.port, baudrate=getattr(args, "baud", 115200), **kwargs)
    link.on_close = _say_line_report
    return link


def _say_line_report(link) -> None:
    line = link.line_report()
    if line:
        print(f"rigbench: {line}", file=sys.stderr)


def plain(obj):
    """``obj`` as strict-JSON plain data: non-finite floats become null."""
    return to_plain(obj, nonfinite_as_none=True)


def print_json(obj) -> None:
    json.dump(plain(obj), sys.stdout, indent=2)
    sys.stdout.write("\n")


def table(rows: list[list[str]], *, indent: str = "  ") -> str:
    """Left-aligned columns, two spaces apart."""
    if not rows:
        return ""
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return "\n".join(indent + "  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip()
                     for r in rows)
