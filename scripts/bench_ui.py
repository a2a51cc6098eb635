"""How the terminal UI copes with 2 kHz telemetry: redraws per second of the live view, rows
received between redraws (the backlog a redraw catches up), time per redraw, and the CPU
share of the UI process.

By default the simulated board runs in its own process on a pseudo-terminal (``rigbench
sim``), so the CPU figures are those of the UI process alone (link reader, ring, Textual);
``--in-process`` runs it inside (``sim://...``) to compare. Not a test: it prints figures.

    python scripts/bench_ui.py [--seconds 10] [--rate 2000] [--in-process]
"""

from __future__ import annotations

import argparse
import asyncio
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rigbench.ui.app import RigApp  # noqa: E402
from rigbench.ui.screens.live import LiveScreen  # noqa: E402


def start_pty_board(rate_hz: float) -> tuple[subprocess.Popen, str]:
    link = Path(tempfile.mkdtemp()) / "rig"
    proc = subprocess.Popen(
        [sys.executable, "-m", "rigbench.cli", "sim", f"sim://balance?rate={rate_hz:g}",
         "--link", str(link)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        cwd=Path(__file__).resolve().parents[1])
    for _ in range(200):
        if link.exists():
            return proc, str(link)
        time.sleep(0.05)
    proc.terminate()
    raise SystemExit(f"the simulated board did not start: {proc.stderr.read().decode()[:300]}")


async def measure(url: str, rate_hz: float, seconds: float, size=(130, 42)) -> dict:
    app = RigApp(url, stream_hz=rate_hz)
    async with app.run_test(size=size) as pilot:
        for _ in range(500):
            if app.link is not None and app.safety.link == "ok":
                break
            await pilot.pause(0.02)
        else:
            raise SystemExit(f"no link to {url}: {app.safety.alarm or app.failure}")
        live = app.screen
        assert isinstance(live, LiveScreen)
        await pilot.pause(1.5)  # fill part of the window
        backlog, seen = [], live.redraws
        r0, w0, c0, m0 = live.redraws, time.perf_counter(), time.process_time(), \
            time.thread_time()
        s0 = live.redraw_seconds
        while time.perf_counter() - w0 < seconds:
            await pilot.pause(0.01)
            if live.redraws != seen:
                seen = live.redraws
                backlog.append(live.backlog_rows)
        wall = time.perf_counter() - w0
        health = app.link.health()
        out = {
            "redraws_per_s": (live.redraws - r0) / wall,
            "telemetry_rows_per_s": health.telemetry_per_s,
            "backlog_rows_mean": sum(backlog) / max(len(backlog), 1),
            "backlog_rows_max": max(backlog or [0]),
            "redraw_ms_mean": 1e3 * (live.redraw_seconds - s0) / max(live.redraws - r0, 1),
            "cpu_share_process": (time.process_time() - c0) / wall,
            "cpu_share_ui_thread": (time.thread_time() - m0) / wall,
            "rows_in_window": live.last_rows,
            "lost_frames": health.lost_frames,
        }
        app.close_link()
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--rate", type=float, default=2000.0, help="loop and telemetry rate, Hz")
    ap.add_argument("--in-process", action="store_true",
                    help="simulated board inside the UI process (sim://) instead of a pty")
    args = ap.parse_args()
    proc = None
    if args.in_process:
        url = f"sim://balance?rate={args.rate:g}"
    else:
        proc, url = start_pty_board(args.rate)
    try:
        figures = asyncio.run(measure(url, args.rate, args.seconds))
    finally:
        if proc is not None:
            proc.terminate()
            proc.wait(5)
    where = "in the UI process" if args.in_process else f"in its own process ({url})"
    print(f"live view at {args.rate:g} Hz telemetry, simulated board {where}, "
          f"{args.seconds:g} s, {os.cpu_count()} CPUs")
    for key, value in figures.items():
        print(f"  {key:<22} {value:10.3f}" if isinstance(value, float) else
              f"  {key:<22} {value:10d}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
