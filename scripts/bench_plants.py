"""Print how fast each simulated plant runs: simulated seconds per wall-clock second.

Each plant is stepped at the given loop rate (500 Hz by default) with a changing command
and its sensors read every step, as the simulated board's firmware does. Not a test: the
figures depend on the machine.

    python scripts/bench_plants.py [--rate-hz 500] [--sim-s 20]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # run from a checkout

from rigbench.rig.plants.catalog import make_balance, make_plant, make_wheel  # noqa: E402


def run(plant, sim_s: float, command) -> tuple[float, float]:
    """Return (simulated s per wall s, wall µs per step), the caller's command included."""
    n = round(sim_s / plant.dt_s)
    t0 = time.perf_counter()
    for k in range(n):
        plant.step(command(k))
        plant.sensors()
    wall = time.perf_counter() - t0
    return sim_s / wall, 1e6 * wall / n


def plant_cases(rate: float) -> list:
    """(name, make) for each plant; ``make()`` returns (plant, command(k)) ready to run."""
    dt = 1.0 / rate

    def balance_speed():
        # a crude stabilising loop keeps the rig off its stops so the full dynamics run
        r = make_balance("speed", np.random.default_rng(1), 1.0, rate)
        r.set_state(tilt_rad=r.params.balance_offset_rad)
        state = {"i": 0.0}

        def cmd(k):
            s = r.truth()
            e = s["tilt_rad"] - r.params.balance_offset_rad
            state["i"] += e * dt
            return 400.0 * e + 40.0 * s["rate_rad_s"] + 2000.0 * state["i"]
        return r, cmd

    def balance_torque():
        r = make_balance("torque", np.random.default_rng(1), 1.0, rate)
        r.set_state(tilt_rad=r.params.balance_offset_rad)

        def cmd(k):
            s = r.truth()
            return 3.0 * (s["tilt_rad"] - r.params.balance_offset_rad) \
                + 0.3 * s["rate_rad_s"] + 0.0005 * s["wheel_rad_s"]
        return r, cmd

    def wheel():
        w = make_wheel(np.random.default_rng(1), 1.0, rate)
        return w, lambda k: 6.0 + 3.0 * math.sin(2 * math.pi * k * dt)

    def tf3():
        p = make_plant([1.0], [1.0, 3.0, 3.0, 1.0], 0.37, np.random.default_rng(1), 1.0, rate)
        return p, lambda k: 1.0 if (k * dt) % 10 < 5 else -1.0

    return [("balance, speed drive", balance_speed),
            ("balance, torque drive", balance_torque),
            ("wheel (motor + flywheel)", wheel),
            ("e^{-0.37s}/(s+1)^3", tf3)]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rate-hz", type=float, default=500.0)
    ap.add_argument("--sim-s", type=float, default=20.0)
    args = ap.parse_args()
    rate, sim_s = args.rate_hz, args.sim_s

    print(f"loop rate {rate:g} Hz, {sim_s:g} simulated s each")
    print(f"{'plant':34s} {'sim s / wall s':>15s} {'µs / step':>10s}")
    for name, make in plant_cases(rate):
        plant, cmd = make()
        ratio, us = run(plant, sim_s, cmd)
        extra = ""
        if "balance" in name:
            extra = f"  (on stop at end: {bool(plant.truth()['on_stop'])})"
        print(f"{name:34s} {ratio:15.1f} {us:10.2f}{extra}")


if __name__ == "__main__":
    main()
