"""A simulated board on a pseudo-terminal, for programs that open a device path
(``rigbench sim``; README.md, Commands).

``serve_pty(options, on_ready=...)`` opens a pty (``os.openpty``), puts the slave in raw
mode, makes it owner-only (0600), keeps its own slave descriptor open (otherwise reads on
the master raise EIO while no program has the device open), makes the master
non-blocking, and serves the board paced to wall time until ``stop`` is set. The master
blocks after some kB of unread output: the server then stops draining the board, whose
transmit buffer fills and drops telemetry (counted in the board's ``drops``), as a real
board on a slow link does. Host bytes are fed to the board as soon as they arrive (the
kill byte acts before the next loop period).

``run_sim_server(url_or_rig, link_path)`` is the command-line front: prints the device
path, optionally makes a symlink to it, serves until Ctrl-C, returns an exit code.

POSIX only.
"""

from __future__ import annotations

import errno
import os
import select
import sys
import threading
import time
import tty
from collections.abc import Callable
from dataclasses import dataclass

from rigbench.rig.simlink import SimLink
from rigbench.rig.url import SimOptions, parse_sim_url

__all__ = ["serve_pty", "run_sim_server", "PtyStats"]

PERIOD_WAKE_S = 0.002
MAX_LAG_S = 0.25


@dataclass
class PtyStats:
    """What a pty session did: loop periods run, bytes each way, periods skipped."""

    path: str = ""
    steps: int = 0
    bytes_in: int = 0
    bytes_out: int = 0
    late_steps: int = 0
    drops: int = 0


def serve_pty(options: SimOptions, *, on_ready: Callable[[str], None],
              stop: threading.Event | None = None, link: SimLink | None = None) -> PtyStats:
    """Serve a simulated board on a new pty until ``stop`` is set (or Ctrl-C).

    ``on_ready(path)`` is called with the slave's device path once the board runs.
    """
    if options.clock != "real":
        raise ValueError("a board on a pty runs in real time: clock=virtual does not apply")
    link = SimLink(options) if link is None else link
    stop = threading.Event() if stop is None else stop
    master, slave = os.openpty()
    stats = PtyStats()
    try:
        tty.setraw(slave)
        path = os.ttyname(slave)
        os.chmod(path, 0o600)
        os.set_blocking(master, False)
        stats.path = path
        on_ready(path)
        _serve(link, master, stop, stats)
    except KeyboardInterrupt:
        pass
    finally:
        stats.drops = link.board.drops
        os.close(master)
        os.close(slave)
    return stats


def _serve(link: SimLink, master: int, stop: threading.Event, stats: PtyStats) -> None:
    period = link.board.dt_s
    t0 = time.monotonic()
    pending = b""
    while not stop.is_set() and not link.unplugged:
        readable, _, _ = select.select([master], [], [], PERIOD_WAKE_S)
        if readable:
            try:
                data = os.read(master, 4096)
            except BlockingIOError:
                data = b""
            except OSError as exc:
                if exc.errno != errno.EIO:
                    raise
                data = b""
            if data:
                stats.bytes_in += len(data)
                link.write(data)
        target = int((time.monotonic() - t0) / period)
        behind = target - stats.steps
        if behind * period > MAX_LAG_S:
            skip = behind - int(MAX_LAG_S / period)
            stats.late_steps += skip
            stats.steps += skip
            behind -= skip
        for _ in range(max(behind, 0)):
            link.advance()
            stats.steps += 1
            if not pending:
                pending = link.drain()
            if pending:
                try:
                    n = os.write(master, pending)
                except BlockingIOError:
                    n = 0
                stats.bytes_out += n
                pending = pending[n:]


def run_sim_server(url_or_rig: str, link_path: str | None = None) -> int:
    """Serve ``sim://...`` (or a bare rig name) on a pty until Ctrl-C; 0 ok, 2 bad URL."""
    url = url_or_rig if "://" in url_or_rig else f"sim://{url_or_rig}"
    try:
        options = parse_sim_url(url)
        if options.clock != "real":
            raise ValueError("clock=virtual does not apply to a board on a pty")
    except ValueError as exc:
        print(f"rigbench sim: {exc}", file=sys.stderr)
        return 2
    made_link = []

    def ready(path: str) -> None:
        if link_path:
            if os.path.islink(link_path):
                os.unlink(link_path)
            elif os.path.exists(link_path):
                raise FileExistsError(f"{link_path} exists and is not a symlink")
            os.symlink(path, link_path)
            made_link.append(link_path)
        shown = f"{path} (link {link_path})" if link_path else path
        print(f"simulated board ({url}) on {shown}", flush=True)
        print("Ctrl-C stops it. This is a simulation, not a rig.", flush=True)

    try:
        stats = serve_pty(options, on_ready=ready)
    except FileExistsError as exc:
        print(f"rigbench sim: {exc}", file=sys.stderr)
        return 2
    finally:
        for p in made_link:
            if os.path.islink(p):
                os.unlink(p)
    print(f"stopped after {stats.steps * options.rate_hz ** -1:.1f} s; "
          f"{stats.bytes_in} bytes in, {stats.bytes_out} out, {stats.drops} telemetry "
          "frames dropped", flush=True)
    return 0
