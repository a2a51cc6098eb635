"""The shipped wheel demo (sequences/demo-wheel-relay.yaml) runs to the end on the simulated
wheel board (virtual clock): the relay runs around the operating point the sequence sets,
with the bias taken relative to the operating output."""

import math
from pathlib import Path

import yaml

from rigbench.cli import main
from rigbench.rig.plants.wheel import WheelParams

DEMO = Path(__file__).parents[1] / "sequences" / "demo-wheel-relay.yaml"


def test_wheel_demo_passes_and_relays_around_its_operating_point(tmp_path, capsys):
    out = tmp_path / "results"
    code = main(["run", str(DEMO), "--out", str(out), "--no-plots"])
    capsys.readouterr()
    s = yaml.safe_load((out / "summary.yaml").read_text())
    assert code == 0 and s["ok"] and s["checks"] == {"total": 2, "failed": 0}
    relay = next(st for st in s["steps"] if st["kind"] == "relay")
    settings = relay["data"]["settings"]
    assert relay["data"]["stopped_by"] == "converged" and settings["bias"] == 0
    # the operating output at 20 rev/s: the DC motor's steady state (Hughes & Drury,
    # Electric Motors and Drives) u = (ω·(Kt·Ke + R·b) + R·Tc)/Kt, Ke = Kt, ≈ 3.31 V
    p = WheelParams()
    w = 20.0 * 2 * math.pi
    kt, r = p.torque_constant_Nm_A, p.resistance_ohm
    u0 = (w * (kt * kt + r * p.viscous_friction_Nms_rad) + r * p.coulomb_friction_Nm) / kt
    assert abs(settings["centre"] - u0) < 0.03 * u0
    assert abs(relay["data"]["operating_measure"] - 20.0) < 0.2
