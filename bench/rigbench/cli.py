"""``rigbench``: the command-line program (console script ``rigbench = rigbench.cli:main``).

Each subcommand lives in its own module ``bench/rigbench/commands/<name>.py`` with two functions,
``add_parser(subparsers) -> argparse.ArgumentParser`` and ``run(args) -> int``; the names in
``COMMAND_MODULES`` below (plain imports) are the ones registered, in the order ``--help`` lists them, and plain
``rigbench`` runs ``DEFAULT_COMMAND`` (the terminal UI). A command
returns an exit code or raises: ``CommandError(code, message)`` for an expected failure,
``LinkError``/``BoardRefused`` from the link; ``main`` turns these into one line on stderr
and the exit code. A traceback is printed only with ``--debug``.

Exit codes (``EXIT_CODES``):

    0    ok
    1    internal error (a bug in rigbench: run again with --debug and report it)
    2    usage: bad arguments or a file given on the command line cannot be used
    3    link: port missing, busy or not permitted; link lost; no reply from the board
    4    the board refused a command (its error code and text are printed)
    5    a guard tripped or a safety stop ended the run
    6    a check failed (a verification or comparison came out wrong)
    7    results could not be written (disk full, I/O error): recording cut at its last
         whole line and marked incomplete; a running experiment was stopped
    130  interrupted (Ctrl-C) before the command finished
"""

from __future__ import annotations

import argparse
import errno
import os
import sys
import traceback

from rigbench.base.stops import (  # noqa: F401
    EXIT_CHECK, EXIT_CODES, EXIT_DISK, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_LINK, EXIT_OK, EXIT_REFUSED,
    EXIT_TRIP, EXIT_USAGE,
)
from rigbench.base.version import package_version
from rigbench.commands._common import DEFAULT_PORT, CommandError  # noqa: F401

# Subcommand modules under bench/rigbench/commands/, in the order --help shows them.
from rigbench.commands import (  # noqa: E402  (each loads light: tests/test_cli_imports.py)
    clear, diff, examples, info, kill, ports, pull, push, report, run, sim, sweep, tune, ui,
    watch,
)

# the subcommands, in the order --help lists them
COMMAND_MODULES = {"ui": ui, "ports": ports, "info": info, "watch": watch, "kill": kill,
                   "clear": clear, "sim": sim, "tune": tune, "sweep": sweep, "push": push,
                   "pull": pull, "diff": diff, "run": run, "report": report,
                   "examples": examples}
COMMANDS = list(COMMAND_MODULES)
DEFAULT_COMMAND = "ui"  # what plain ``rigbench`` runs



class UsageError(Exception):
    pass


class Parser(argparse.ArgumentParser):
    """argparse with usage errors raised (main prints them as one line)."""

    def error(self, message: str):
        raise UsageError(f"{self.prog}: {message} (see {self.prog} --help)")


def build_parser() -> Parser:
    """The whole command line: one subparser per module of ``COMMAND_MODULES``."""
    parser = Parser(prog="rigbench",
                    description="Tune, verify and document the control loops of balanced rigs.",
                    epilog="exit codes: " + "; ".join(f"{k} {v.split(':')[0].split(' (')[0]}"
                                                      for k, v in EXIT_CODES.items()))
    parser.add_argument("--debug", action="store_true", help="show tracebacks of errors")
    parser.add_argument("--version", action="version", version=f"rigbench {package_version()}",
                        help="print the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in COMMAND_MODULES.values():
        sp = module.add_parser(sub)
        sp.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show tracebacks of errors")
        sp.set_defaults(_run=module.run)
    return parser


_DISK_ERRNOS = {errno.ENOSPC, errno.EDQUOT, errno.EIO, errno.EROFS, errno.EFBIG}


def _fail(code: int, message: str, debug: bool) -> int:
    if debug:
        traceback.print_exc(file=sys.stderr)
    text = " ".join(str(message).split()) or EXIT_CODES.get(code, "error")
    print(text if text.startswith("rigbench") else f"rigbench: {text}", file=sys.stderr)
    return code


def main(argv: list[str] | None = None) -> int:
    """Run rigbench with ``argv`` (default: sys.argv[1:]); return the exit code."""
    from rigbench.link.urls import register_url_handlers
    from rigbench.link import BoardRefused, LinkError

    register_url_handlers()  # sim:// and replay:// for every command
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = "--debug" in argv
    if (DEFAULT_COMMAND in COMMANDS and not any(tok in COMMANDS for tok in argv)
            and not any(tok in ("-h", "--help", "--version") for tok in argv)):
        # `rigbench --port /dev/ttyACM0` means the default command with that option
        argv = [DEFAULT_COMMAND] + [tok for tok in argv if tok != "--debug"] + (
            ["--debug"] if debug else [])
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
    except UsageError as exc:
        return _fail(EXIT_USAGE, str(exc), False)
    except SystemExit as exc:  # --help, --version
        return exc.code if isinstance(exc.code, int) else EXIT_OK
    if getattr(args, "_run", None) is None:
        return _fail(EXIT_USAGE, f"name a command: {', '.join(COMMANDS)} (see rigbench --help)",
                     False)
    try:
        code = args._run(args)
        return EXIT_OK if code is None else int(code)
    except CommandError as exc:
        return _fail(exc.code, str(exc), debug)
    except BoardRefused as exc:
        return _fail(EXIT_REFUSED, str(exc), debug)
    except LinkError as exc:
        return _fail(EXIT_LINK, str(exc), debug)
    except KeyboardInterrupt:
        return _fail(EXIT_INTERRUPTED, "interrupted", debug)
    except BrokenPipeError:
        # the reader of our output went away (`rigbench watch | head`): not an error
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return EXIT_OK
    except OSError as exc:
        if exc.errno in _DISK_ERRNOS:  # a results file that cannot be written: not a bug
            where = f"cannot write {exc.filename}" if exc.filename else "cannot write results"
            return _fail(EXIT_DISK, f"{where}: {exc.strerror}", debug)
        return _fail(EXIT_INTERNAL, f"internal error: OSError: {exc}"
                     " (run again with --debug and report it)", debug)
    except Exception as exc:  # noqa: BLE001 - the user gets one line; --debug shows more
        first = str(exc).splitlines()[0] if str(exc) else ""
        return _fail(EXIT_INTERNAL, f"internal error: {type(exc).__name__}: {first}"
                     " (run again with --debug and report it)", debug)


if __name__ == "__main__":
    sys.exit(main())
