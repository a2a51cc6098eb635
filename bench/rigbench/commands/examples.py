"""``rigbench examples [DIR]``: copy the demo gain profiles and sequences, the protocol
specification and its test vectors into a folder, so the examples of the README run from
there after a wheel or pipx install.

Files already in DIR with the same content are left alone; a file with other content stops
the copy before anything is written (exit 2) unless ``--force``. The files come from the
installed package (or, in a source checkout, from the repository's own folders).
"""

from __future__ import annotations

import json
import shlex

from rigbench.base.examples import ExamplesMissing, copy_examples
from rigbench.base.stops import EXIT_OK, EXIT_USAGE
from rigbench.commands._common import CommandError, help_text

DEFAULT_DIR = "rigbench-examples"


def add_parser(subparsers):
    p = subparsers.add_parser("examples", help="copy the demo profiles, sequences and the "
                              "protocol files into a folder", description=help_text(__doc__))
    p.add_argument("dir", nargs="?", default=DEFAULT_DIR, metavar="DIR",
                   help=f"folder to copy into (default {DEFAULT_DIR}; created if missing)")
    p.add_argument("--force", action="store_true",
                   help="replace files in DIR that differ from the shipped ones")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object for scripts instead of text")
    return p


def run(args) -> int:
    try:
        result = copy_examples(args.dir, force=args.force)
    except ExamplesMissing as exc:
        raise CommandError(EXIT_USAGE, str(exc)) from None
    except FileExistsError as exc:
        raise CommandError(EXIT_USAGE, f"{exc}; give --force to replace it, or another "
                                       "folder") from None
    except OSError as exc:
        raise CommandError(EXIT_USAGE, f"{exc.filename or args.dir}: "
                                       f"{exc.strerror or exc}") from None
    if args.json:
        print(json.dumps({"ok": True, "dir": str(result.dest),
                          "written": [str(p) for p in result.written],
                          "unchanged": [str(p) for p in result.unchanged]}))
        return EXIT_OK
    print(f"{len(result.written)} files written to {result.dest}"
          + (f", {len(result.unchanged)} already there" if result.unchanged else ""))
    print(f"next: cd {shlex.quote(str(result.dest))} && rigbench push profiles/demo-balance-start.yaml --dry-run")
    print("      rigbench run sequences/demo-balance-check.yaml "
          "--port 'sim://balance?clock=virtual'")
    return EXIT_OK
