"""Shared pieces of the profile commands (push, pull, diff): opening the link, and turning
their errors (bad file, refused profile, board refusal, link failure) into one line on
stderr, or one JSON object with ``--json``, and the exit code (bench/rigbench/cli.py).

``-`` as a profile file means standard input (read) or standard output (write).
"""

from __future__ import annotations

import json
import sys
from contextlib import contextmanager

from rigbench.base.stops import EXIT_CHECK, EXIT_LINK, EXIT_OK, EXIT_REFUSED, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import add_json_option as add_json  # noqa: F401
from rigbench.commands._common import add_port_option as add_port  # noqa: F401
from rigbench.link import BoardRefused, Link, LinkError  # noqa: F401
from rigbench.profiles.model import Profile, dump_profile, load_profile, load_profile_text
from rigbench.commands._common import open_link as _open_link
from rigbench.profiles.push import PushRefused
from rigbench.base.yamlload import SchemaError


STDIO = "-"
STDIN_NAME = "<stdin>"


def read_profile(arg: str) -> Profile:
    """The profile in file ``arg``, or on standard input for ``-`` (named <stdin> in errors)."""
    if arg == STDIO:
        return load_profile_text(sys.stdin.read(), STDIN_NAME)
    return load_profile(arg)


def write_profile_stdout(profile: Profile) -> None:
    sys.stdout.write(dump_profile(profile))
    sys.stdout.flush()


@contextmanager
def open_link(args):
    """The link of ``args.port`` at ``args.baud`` (the one way commands open a link)."""
    link = _open_link(args)
    try:
        yield link
    finally:
        link.close()


def problem_dict(p) -> dict:
    return {"field": p.field, "message": p.message, "line": p.line, "severity": p.severity}


def fail(args, exit_code: int, message: str, /, **extra) -> int:
    """Report a failure as one line on stderr (or a JSON object on stdout); return
    ``exit_code``. ``extra`` goes into the JSON object (a board refusal's ``code`` too)."""
    if getattr(args, "json", False):
        print(json.dumps({"ok": False, "error": message, "exit": exit_code, **extra}))
    else:
        print(f"rigbench {args.command}: {message}", file=sys.stderr)
    return exit_code


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
