"""Shared pieces of the profile commands (push, pull, diff): exit codes, opening the link,
turning errors into one line on stderr and an exit code.

Must not import textual or bench.ui.
"""

from __future__ import annotations

import json
import sys
from contextlib import contextmanager

from bench.link import BoardRefused, Link, LinkError
from bench.profile_push import PushRefused
from bench.yamlload import SchemaError

# Exit codes (README, "Exit codes").
EXIT_OK, EXIT_INTERNAL, EXIT_USAGE, EXIT_LINK, EXIT_REFUSED, EXIT_GUARD, EXIT_CHECK = range(7)
DEFAULT_PORT = "sim://balance"


def add_port(parser) -> None:
    parser.add_argument("--port", default=DEFAULT_PORT, metavar="URL",
                        help="device path, pyserial URL or sim://... (default: %(default)s)")


def add_json(parser) -> None:
    parser.add_argument("--json", action="store_true", help="print one JSON object")


@contextmanager
def open_link(url: str):
    link = Link.open(url)
    try:
        yield link
    finally:
        link.close()


def problem_dict(p) -> dict:
    return {"field": p.field, "message": p.message, "line": p.line, "severity": p.severity}


def fail(args, code: int, message: str, **extra) -> int:
    """Report a failure as one line on stderr (or a JSON object on stdout); return ``code``."""
    if getattr(args, "json", False):
        print(json.dumps({"ok": False, "error": message, "exit": code, **extra}))
    else:
        print(f"rigbench {args.command}: {message}", file=sys.stderr)
    return code


def guarded(args, body) -> int:
    """Run ``body()`` and map the errors the profile commands share to exit codes."""
    try:
        return body()
    except SchemaError as exc:
        return fail(args, EXIT_USAGE, str(exc))
    except PushRefused as exc:
        return fail(args, EXIT_REFUSED, str(exc),
                    refused=[problem_dict(p) for p in exc.problems])
    except BoardRefused as exc:
        return fail(args, EXIT_REFUSED, str(exc), code=exc.code, text=exc.text)
    except LinkError as exc:
        return fail(args, EXIT_LINK, str(exc))
    except (FileExistsError, IsADirectoryError, PermissionError) as exc:
        return fail(args, EXIT_USAGE, f"{exc.filename}: {exc.strerror}")
