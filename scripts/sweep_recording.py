"""A long sweep on the virtual clock and the recording it leaves: sizes, counts and the time
to read it back. By default 2 gain sets × 2 amplitudes × 1000 repeats = 4000 injections
(2 × 2000) on the simulated balance rig; the recording must load whatever its length.

    python scripts/sweep_recording.py [--repeats 1000] [--out DIR]

Prints the CSV, sidecar and events-file sizes, bytes per injection, the events and notes
kept or dropped, and how long load_recording took.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "bench"))

from rigbench.cli import main as rigbench  # noqa: E402
from rigbench.recordings.recording import events_path, load_recording, sidecar_path  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=1000, help="injections per amplitude and set")
    ap.add_argument("--out", type=Path, default=None)
    args = ap.parse_args(argv)
    out = args.out or Path(tempfile.mkdtemp(prefix="rigbench-sweep-")) / "sweep"
    injections = 2 * 2 * args.repeats
    t0 = time.perf_counter()
    with contextlib.redirect_stdout(io.StringIO()):
        code = rigbench(["sweep", "--port", "sim://balance?clock=virtual",
                         "--gains", str(ROOT / "profiles" / "demo-balance-start.yaml"),
                         "--gains", str(ROOT / "profiles" / "demo-balance-soft.yaml"),
                         "--amplitudes", "0.02,0.04", "--repeats", str(args.repeats),
                         "--settle", "0.3", "--width", "0.05", "--out", str(out)])
    run_s = time.perf_counter() - t0
    print(f"sweep of {injections} injections: exit {code}, {run_s:.0f} s wall")
    for csv in sorted(out.glob("*.csv")):
        t1 = time.perf_counter()
        rec = load_recording(csv)
        load_s = time.perf_counter() - t1
        side, ev = sidecar_path(csv), events_path(csv)
        ev_bytes = ev.stat().st_size if ev.exists() else 0
        sc = rec.sidecar or {}
        print(f"{csv.name}: {len(rec)} rows, CSV {csv.stat().st_size / 1e6:.1f} MB; sidecar "
              f"{side.stat().st_size / 1e3:.1f} kB ({side.stat().st_size / injections:.0f} B "
              f"per injection); events file {ev_bytes / 1e6:.2f} MB, {len(rec.events)} events "
              f"({sc.get('events_dropped', 0)} dropped); notes {len(sc.get('notes') or [])} "
              f"({sc.get('notes_dropped', 0)} dropped); complete {rec.complete}; "
              f"loaded in {load_s:.2f} s")
    return 0 if code == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
