"""``rigbench watch``: stream telemetry to the terminal as aligned columns, or record it to
a CSV recording with its YAML sidecar, for a number of seconds or until Ctrl-C.

The recording's format and its writer: rigbench.recordings.recording. ``--csv -`` is
refused: a recording is a CSV file with a YAML sidecar beside it (board, parameters, events),
which standard output cannot hold; plain ``rigbench watch`` prints columns there.
"""

from __future__ import annotations

import math

from rigbench.base.stops import EXIT_DISK, EXIT_USAGE  # noqa: F401
from rigbench.commands._common import CommandError, help_text
from rigbench.recordings.recording import Recorder, RecordingError

from rigbench.commands._common import add_port_option, open_link
from rigbench.commands._signals import kill_on_signal


def add_parser(subparsers):
    p = subparsers.add_parser("watch", help="stream telemetry to the terminal or a CSV file",
                              description=help_text(__doc__))
    add_port_option(p)
    p.add_argument("--seconds", type=float, default=None, metavar="N",
                   help="how long to watch, in the board's time (default: until Ctrl-C)")
    p.add_argument("--csv", default=None, metavar="FILE",
                   help="record to FILE (.csv) and FILE's .yaml sidecar instead of printing "
                        "(a file, not -: without --csv the columns go to standard output)")
    p.add_argument("--rate", type=float, default=None, metavar="HZ",
                   help="telemetry rate to ask the board for (default 20 on the terminal, "
                        "100 for a recording)")
    p.add_argument("--every", type=float, default=0.2, metavar="S",
                   help="seconds between printed lines (default 0.2)")
    p.add_argument("--force", action="store_true", help="overwrite an existing FILE")
    return p


def _cell(value: float, width: int) -> str:
    if not math.isfinite(value):
        return "-".rjust(width)
    return f"{value:{width}.5g}"


def _lines(link, every_s: float, seconds: float | None):
    """Header, then one line per ``every_s`` of link time with the newest row."""
    names = ["time [s]"] + [f"{s.name} [{s.unit}]" for s in link.signals]
    width = max(11, *(len(n) for n in names))
    yield "  ".join(n.rjust(width) for n in names)
    t0 = link.now()
    while seconds is None or link.now() - t0 < seconds - 1e-9:
        link.sleep(every_s if seconds is None else min(every_s, seconds - (link.now() - t0)))
        snap = link.snapshot(rows=1)
        if len(snap):
            cells = [_cell(link.now() - t0, width)] + [_cell(v, width) for v in snap.values[0]]
            yield "  ".join(cells)


def run(args) -> int:
    if args.seconds is not None and args.seconds <= 0:
        raise CommandError(EXIT_USAGE, "--seconds must be positive")
    if args.every <= 0:
        raise CommandError(EXIT_USAGE, "--every must be positive")
    if args.csv == "-":
        raise CommandError(EXIT_USAGE, "--csv -: a recording is a CSV file with a YAML sidecar "
                           "beside it, which standard output cannot hold; give a file name, "
                           "or leave out --csv to print columns to standard output")
    with open_link(args) as link, kill_on_signal(link, only_if_moving=True):
        if args.csv:
            rate = args.rate if args.rate is not None else 100.0
            try:
                recorder = Recorder(args.csv, link, overwrite=args.force,
                                    notes=[f"rigbench watch --rate {rate:g}"])
            except RecordingError as exc:
                raise CommandError(EXIT_USAGE, str(exc)) from None
            actual = link.stream(rate)
            recorder.start()
            try:
                t0 = link.now()
                try:
                    while ((args.seconds is None or link.now() - t0 < args.seconds - 1e-9)
                           and recorder.failed is None):
                        left = 1.0 if args.seconds is None else args.seconds - (link.now() - t0)
                        link.sleep(min(1.0, left))
                except KeyboardInterrupt:
                    pass
            finally:
                recorder.close()
            if recorder.failed:
                raise CommandError(EXIT_DISK, f"{recorder.failed}; {recorder.rows} rows kept")
            print(f"recorded {recorder.rows} rows at {actual:g} Hz to {recorder.path} "
                  f"(sidecar {recorder.sidecar})")
        else:
            link.stream(args.rate if args.rate is not None else 20.0)
            try:
                for line in _lines(link, args.every, args.seconds):
                    print(line, flush=True)
            except KeyboardInterrupt:
                pass
        _stop_stream(link)
    return 0


def _stop_stream(link) -> None:
    try:
        link.stream(0)
    except Exception:  # noqa: BLE001 - a board that went away already stopped streaming
        pass
