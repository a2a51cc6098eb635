"""Print how long rigbench.tuning.margins takes on loops with long dead times, the cases that
once took seconds (a discrete loop with 250 samples of dead time; a continuous plant with
dead time under a PID with a short derivative filter, whose |C| stays high far above the
crossover). Not a test: the figures depend on the machine.

    python scripts/bench_margins.py [--repeat 5]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # run from a checkout

from rigbench.tuning.loop import LoopController, PlantModel  # noqa: E402
from rigbench.tuning.margins import margins  # noqa: E402

FOPDT_1S = PlantModel([1.0], [1.0, 1.0], 1.0)
CASES = [
    ("discrete PID, 1/(s+1), 250 samples dead time (h 2 ms)",
     LoopController(0.5, 0.4, 0.1, tf_s=0.01, h_s=0.002), PlantModel([1.0], [1.0, 1.0], 0.5)),
    ("discrete PI, e^-s/(s+1), 500 samples dead time (h 2 ms)",
     LoopController(1.0178, 1.0178 / 2.5809, h_s=0.002), FOPDT_1S),
    ("discrete PID, 1/(s+1), 20 samples dead time (h 2 ms)",
     LoopController(0.5, 0.4, 0.1, tf_s=0.01, h_s=0.002), PlantModel([1.0], [1.0, 1.0], 0.04)),
    ("continuous PID, e^-s/(s+1), derivative filter 2 ms",
     LoopController(0.4, 0.8, 0.15, tf_s=0.002), FOPDT_1S),
    ("continuous PI, e^-s/(s+1)", LoopController(1.0178, 1.0178 / 2.5809), FOPDT_1S),
    ("continuous PID, 1/(s+1)^3, no dead time",
     LoopController(4.8, 2.6, 2.2, 0.1), PlantModel([1.0], [1.0, 3.0, 3.0, 1.0])),
]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5, help="best of this many calls")
    args = ap.parse_args(argv)
    print(f"{'loop':58s} {'best ms':>9s}  method")
    for name, ctrl, plant in CASES:
        best = float("inf")
        for _ in range(max(args.repeat, 1)):
            t0 = time.perf_counter()
            m = margins(ctrl, plant)
            best = min(best, time.perf_counter() - t0)
        print(f"{name:58s} {1e3 * best:9.1f}  {m.method}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
