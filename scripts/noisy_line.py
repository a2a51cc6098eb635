"""How often `rigbench tune` and `rigbench run` finish on a noisy line with the default
link settings: each seed runs both commands on the simulated balance rig (virtual clock)
with every byte bit-flipped at the given rate, both directions, and the exit codes,
resends and lost replies settled by asking `status` are printed.

    python scripts/noisy_line.py [--corrupt 0.003] [--seeds 10] [--json]

The figure docs/FAULTS.md quotes is this script's output at 0.3 % a byte, 10 seeds.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "bench"))

from rigbench.cli import main as rigbench  # noqa: E402

DEMO = ROOT / "sequences" / "demo-balance-check.yaml"


def one(command: str, url: str, work: Path) -> tuple[int, str]:
    """Run one command in-process; return its exit code and the last line it printed."""
    if command == "tune":
        argv = ["tune", "--port", url, "--loop", "tilt"]
    else:
        argv = ["run", str(DEMO), "--port", url, "--out", str(work), "--no-plots"]
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = rigbench(argv)
    lines = (err.getvalue() or out.getvalue()).strip().splitlines()
    return code, lines[-1] if lines else ""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--corrupt", type=float, default=0.003, help="bit-flip probability a byte")
    ap.add_argument("--seeds", type=int, default=10)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args(argv)
    work = Path(tempfile.mkdtemp(prefix="rigbench-noisy-"))
    rows = []
    t0 = time.perf_counter()
    for seed in range(1, args.seeds + 1):
        url = f"sim://balance?clock=virtual&corrupt={args.corrupt:g}&seed={seed}"
        for command in ("tune", "run"):
            code, last = one(command, url, work / f"{command}-{seed}")
            rows.append({"seed": seed, "command": command, "exit": code, "last": last})
    wall = time.perf_counter() - t0
    done = {c: sum(r["exit"] == 0 for r in rows if r["command"] == c) for c in ("tune", "run")}
    if args.json:
        print(json.dumps({"corrupt": args.corrupt, "seeds": args.seeds, "finished": done,
                          "wall_s": wall, "runs": rows}, indent=1))
        return 0
    for r in rows:
        print(f"seed {r['seed']:2d} {r['command']:4s} exit {r['exit']}  {r['last'][:100]}")
    print(f"\ncorrupt={args.corrupt:g}/byte, default link settings: tune finished "
          f"{done['tune']}/{args.seeds}, run finished {done['run']}/{args.seeds} "
          f"({wall:.0f} s wall)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
