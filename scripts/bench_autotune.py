"""Print how the relay autotune does on the docs/METHODS.md §3 plants and the balance rig's two
drives (simulated boards, virtual clock): rig seconds and cycles to convergence, wall
time, the measured point's error against the true plant, Ku/Tu against the exact ultimate
point, and for the balance rig the fitted unstable pole against the simulator's.

Wall time is that of the whole autotune flow (relay test and proposals, what `rigbench
tune` runs); the target for the balance rig is under 3 s on the virtual clock, and the
ratio to it is printed.

Not a test: figures depend on the seed and the machine (wall time).

    python scripts/bench_autotune.py [--seeds 3] [--noise 1]

True responses: the plants' transfer functions evaluated with numpy; the balance rig's
linear model θ/u from its parameters (docs/METHODS.md §4: speed drive −c·s·H(s)/(s² − a²),
H = 1/(T·s + 1); torque drive −(1/Jp)/(s² − a²)), in the board's units (deg per rev/s,
deg per N.m), times the board's complementary tilt filter (it leads by about ω·dt/2).
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # run from a checkout

from rigbench.experiments.autotune import autotune  # noqa: E402
from rigbench.link import Link  # noqa: E402
from rigbench.link.urls import register_url_handlers  # noqa: E402

register_url_handlers()  # sim:// for serial_for_url

# name: (num, den, delay s, exact Ku, exact Tu s) — docs/METHODS.md §3 [calc]
PLANTS = {
    "1/(s+1)^3": ((1.0,), (1.0, 3.0, 3.0, 1.0), 0.0, 8.0000, 3.6276),
    "e^-s/(s+1)": ((1.0,), (1.0, 1.0), 1.0, 2.2618, 3.0971),
    "e^-0.5s/(s+1)^2": ((1.0,), (1.0, 2.0, 1.0), 0.5, 4.6879, 3.2718),
    # slow and lightly damped plants, exact points [calc] as in tests/experiments/test_exp_autotune.py
    "e^-3s/(8s+1)^2": ((1.0,), (64.0, 16.0, 1.0), 3.0, 6.0161, 22.443),
    "1/(s+1)^5": ((1.0,), (1.0, 5.0, 10.0, 10.0, 5.0, 1.0), 0.0, 2.8854, 8.6481),
    "damped+lag": ((1.0,), (1.0, 1.2, 1.2, 1.0), 0.3, 0.33717, 5.9894),
}
BALANCE_TARGET_WALL_S = 3.0


def _url_coeffs(c) -> str:
    return ",".join(f"{x:g}" for x in c)


def _errors(point, g: complex) -> tuple[float, float]:
    gain_err = point.gain / abs(g) - 1.0
    dphi = (point.phase_deg - math.degrees(np.angle(g)) + 180.0) % 360.0 - 180.0
    return gain_err, dphi


def _balance_truth(board, drive: str, omega: float) -> complex:
    """Linear θ/u of the rig times the board's tilt estimate (complementary filter)."""
    p = board.plant.params
    s = 1j * omega
    if drive == "speed":
        a2 = p.mgl_Nm_rad / p.total_inertia_kgm2
        g = -p.wheel_share * s / ((p.driver_lag_s * s + 1.0) * (s * s - a2))
        g *= (2 * math.pi) / math.radians(1.0)      # deg per rev/s
    else:
        a2 = p.mgl_Nm_rad / p.body_inertia_kgm2
        g = -(1.0 / p.body_inertia_kgm2) / (s * s - a2) / math.radians(1.0)  # deg per N.m
    # tilt[k] = α(tilt[k−1] + gyro·dt) + (1 − α)·accel, gyro and accel exact at the sample:
    # estimate/tilt = (α·dt·jω + 1 − α)·z/(z − α), z = e^{jω·dt}
    dt, tc = board.dt_s, board.params.values["tilt_tc_s"]
    alpha = tc / (tc + dt)
    z = np.exp(s * dt)
    return g * (alpha * dt * s + 1 - alpha) * z / (z - alpha)


def _row(cells, widths) -> str:
    return "  ".join(str(c).rjust(w) for c, w in zip(cells, widths))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--noise", type=float, default=1.0)
    args = ap.parse_args()
    head = ["case", "seed", "rig s", "relay s", "cycles", "wall s", "x real", "gain err %",
            "phase err deg", "Ku err %", "Tu err %", "pole err %"]
    widths = [18, 4, 6, 7, 6, 6, 6, 10, 13, 8, 8, 10]
    print(_row(head, widths))
    summary: dict[str, list] = {}
    for name, (num, den, delay, ku, tu) in PLANTS.items():
        for seed in range(args.seeds):
            url = (f"sim://plant?num={_url_coeffs(num)}&den={_url_coeffs(den)}&delay={delay:g}"
                   f"&noise={args.noise:g}&seed={seed}&clock=virtual")
            with Link.open(url) as link:
                t0 = time.perf_counter()
                res = autotune(link, "main")
                wall = time.perf_counter() - t0
            run = res.run
            if not run.converged:
                print(_row([name, seed, f"{run.rig_seconds:.1f}", "-", "-", f"{wall:.2f}", "-",
                            run.stopped_by, run.reason[:40], "", "", ""], widths))
                continue
            w = run.point.omega_rad_s
            g = np.polyval(num, 1j * w) / np.polyval(den, 1j * w) * np.exp(-1j * w * delay)
            ge, pe = _errors(run.point, g)
            summary.setdefault("plants", []).append((run.rig_seconds, run.relay_seconds, ge, pe,
                                                     wall))
            print(_row([name, seed, f"{run.rig_seconds:.1f}", f"{run.relay_seconds:.1f}",
                        run.analysis.cycles, f"{wall:.2f}", f"{run.rig_seconds / wall:.0f}",
                        f"{100 * ge:+.3f}", f"{pe:+.3f}", f"{100 * (run.ku / ku - 1):+.1f}",
                        f"{100 * (run.tu_s / tu - 1):+.1f}", "-"], widths))
    for drive in ("speed", "torque"):
        for seed in range(args.seeds):
            url = f"sim://balance?drive={drive}&noise={args.noise:g}&seed={seed}&clock=virtual"
            with Link.open(url) as link:
                t0 = time.perf_counter()
                res = autotune(link, "tilt")
                wall = time.perf_counter() - t0
                run = res.run
                board = link.port.board
                p = board.plant.params
                truth_a = (p.speed_drive_pole_rad_s if drive == "speed"
                           else p.torque_drive_pole_rad_s)
            name = f"balance {drive}"
            if not run.converged:
                print(_row([name, seed, f"{run.rig_seconds:.1f}", "-", "-", f"{wall:.2f}", "-",
                            run.stopped_by, run.reason[:40], "", "", ""], widths))
                continue
            ge, pe = _errors(run.point, _balance_truth(board, drive, run.point.omega_rad_s))
            ps = res.proposals
            pole = "-" if ps is None or ps.model is None else \
                f"{100 * (ps.model.a / truth_a - 1):+.2f}"
            summary.setdefault(name, []).append((run.rig_seconds, run.relay_seconds, ge, pe,
                                                 wall))
            print(_row([name, seed, f"{run.rig_seconds:.1f}", f"{run.relay_seconds:.1f}",
                        run.analysis.cycles, f"{wall:.2f}", f"{run.rig_seconds / wall:.0f}",
                        f"{100 * ge:+.3f}", f"{pe:+.3f}", "-", "-", pole], widths))
    print()
    for name, rows in summary.items():
        relay_s = [r[1] for r in rows]
        print(f"{name}: median {statistics.median(relay_s):.1f} s of relay to converge, worst "
              f"point error {100 * max(abs(r[2]) for r in rows):.2f}% / "
              f"{max(abs(r[3]) for r in rows):.2f} deg over {len(rows)} runs; wall per "
              f"autotune median {statistics.median(r[4] for r in rows):.2f} s, worst "
              f"{max(r[4] for r in rows):.2f} s")
        if name.startswith("balance"):
            worst = max(r[4] for r in rows)
            print(f"  {name} tune wall: worst {worst:.2f} s = {worst / BALANCE_TARGET_WALL_S:.2f}"
                  f" x the {BALANCE_TARGET_WALL_S:g} s target")


if __name__ == "__main__":
    main()
