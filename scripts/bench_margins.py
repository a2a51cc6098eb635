"""Print how long rigbench.tuning.margins takes, and the ratio to the polynomial path it
replaced, on sampled loops with long dead times (and a few continuous ones). Target: the
margins of a loop with 250 samples of dead time in under 20 ms. Not a test: the figures
depend on the machine and its load.

The old path (loops as polynomials in z) is read from git at ``--old`` (default: the last
commit before the state-space analysis) into a temporary package; without git or that
commit only the new figures are printed.

    python scripts/bench_margins.py [--repeat 7] [--old ce8942e]
"""

from __future__ import annotations

import argparse
import importlib
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))   # run from a checkout

from rigbench.tuning.loop import LoopController, PlantModel  # noqa: E402
from rigbench.tuning.margins import margins  # noqa: E402

OLD_REV = "ce8942e"
TARGET_MS = 20.0
FOPDT_1S = PlantModel([1.0], [1.0, 1.0], 1.0)
LAG2_DEAD = PlantModel([1.0], [1.0, 2.0, 1.0], 0.5)
CASES = [
    ("target: PID, 1/(s+1)^2 e^-0.5s, 250 samples (500 Hz)",
     dict(kp=2.8127, ki=2.8127 / 1.6359, kd=2.8127 * 0.4090, tf_s=0.0409, h_s=0.002), LAG2_DEAD),
    ("PID, 1/(s+1) e^-0.5s, 250 samples (500 Hz)",
     dict(kp=0.5, ki=0.4, kd=0.1, tf_s=0.01, h_s=0.002), PlantModel([1.0], [1.0, 1.0], 0.5)),
    ("PI, e^-s/(s+1), 500 samples (500 Hz)",
     dict(kp=1.0178, ki=1.0178 / 2.5809, h_s=0.002), FOPDT_1S),
    ("PID, 1/(s+1)^4, no dead time (500 Hz)",
     dict(kp=4 / 3, ki=(4 / 3) / 3.1416, kd=(4 / 3) * 2.0944, h_s=0.002),
     PlantModel([1.0], [1.0, 4.0, 6.0, 4.0, 1.0])),
    ("PID, e^-3s/(8s+1)^2, 1500 samples (500 Hz)",
     dict(kp=3.6097, ki=3.6097 / 11.2217, kd=3.6097 * 2.8054, tf_s=0.2805, h_s=0.002),
     PlantModel([1.0], [64.0, 16.0, 1.0], 3.0)),
    ("continuous PID, e^-s/(s+1), derivative filter 2 ms",
     dict(kp=0.4, ki=0.8, kd=0.15, tf_s=0.002), FOPDT_1S),
    ("continuous PID, 1/(s+1)^3, no dead time",
     dict(kp=4.8, ki=2.6, kd=2.2, tf_s=0.1), PlantModel([1.0], [1.0, 3.0, 3.0, 1.0])),
]


def load_old(rev: str):
    """(LoopController, PlantModel, margins) of the old path, or None."""
    tmp = Path(tempfile.mkdtemp(prefix="old_margins_"))
    pkg = tmp / "old_tuning"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    try:
        for name in ("loop.py", "margins.py"):
            src = subprocess.run(["git", "-C", str(ROOT), "show", f"{rev}:bench/rigbench/tuning/{name}"],
                                 capture_output=True, text=True, check=True).stdout
            (pkg / name).write_text(src)
    except (OSError, subprocess.CalledProcessError):
        return None
    sys.path.insert(0, str(tmp))
    loop = importlib.import_module("old_tuning.loop")
    mar = importlib.import_module("old_tuning.margins")
    return loop.LoopController, loop.PlantModel, mar.margins


def best_ms(fn, repeat: int):
    best, out = float("inf"), None
    for _ in range(max(repeat, 1)):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return 1e3 * best, out


def show(m) -> str:
    if m is None:
        return "–"
    if not m.stable:
        return "unstable"
    gm = "∞" if m.gain_margin_upper is None else f"{m.gain_margin_upper:.3g}"
    pm = "–" if m.phase_margin_deg is None else f"{m.phase_margin_deg:.1f}°"
    return f"GM {gm} PM {pm} Ms {m.ms:.3g}"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7, help="best of this many calls")
    ap.add_argument("--old", default=OLD_REV, help="git revision of the old path")
    args = ap.parse_args(argv)
    old = load_old(args.old)
    print(f"{'loop':54s} {'new ms':>8s} {'old ms':>8s} {'old/new':>8s}  new result | old result")
    target = None
    for name, kw, plant in CASES:
        t_new, m_new = best_ms(lambda: margins(LoopController(**kw), plant), args.repeat)
        t_old = m_old = None
        if old is not None:
            oc, op, om = old
            oplant = op(plant.num, plant.den, plant.delay_s)
            t_old, m_old = best_ms(lambda: om(oc(**kw), oplant), args.repeat)
        ratio = f"{t_old / t_new:8.2f}" if t_old else f"{'–':>8s}"
        old_s = f"{t_old:8.1f}" if t_old else f"{'–':>8s}"
        print(f"{name:54s} {t_new:8.1f} {old_s} {ratio}  {show(m_new)} | {show(m_old)}")
        if target is None:
            target = t_new
    verdict = "met" if target < TARGET_MS else "NOT met"
    print(f"\n250-sample dead-time loop: {target:.1f} ms (target < {TARGET_MS:.0f} ms: {verdict})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
