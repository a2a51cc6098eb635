"""Subcommands of ``rigbench``: one module each, with ``add_parser(subparsers)`` and
``run(args) -> int`` (see bench/rigbench/cli.py for the registry and the exit codes). Shared
helpers are in ``_common``.

Commands sit on top of every other layer; nothing in bench imports them except cli.py.
"""
