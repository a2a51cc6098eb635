"""The tuning core stays pure: importing it pulls in no I/O, UI or test-only library."""

import ast
import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

FORBIDDEN = ("control", "serial", "textual", "matplotlib", "rigbench.link", "rigbench.ui",
             "rigbench.rig")


def test_tuning_imports_no_upper_layer_or_test_library():
    # bench/rigbench/__init__ registers pyserial URL handlers (its own choice), so compare against
    # what importing the bare package already loaded.
    code = (
        "import sys\n"
        "import bench\n"
        "before = set(sys.modules)\n"
        "import rigbench.base.units, rigbench.tuning.relay, rigbench.tuning.rules, rigbench.tuning.loop\n"
        "import rigbench.tuning.margins, rigbench.tuning.balance, rigbench.tuning.metrics\n"
        "new = set(sys.modules) - before\n"
        f"bad = [m for m in new if any(m == f or m.startswith(f + '.') for f in {FORBIDDEN!r})]\n"
        "print(sorted(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT)
    assert out.stdout.strip() == "[]"


def test_tuning_sources_import_nothing_forbidden():
    files = [ROOT / "bench" / "rigbench" / "base" / "units.py", *sorted((ROOT / "bench" / "rigbench" / "tuning").glob("*.py"))]
    for path in files:
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0:
                names = [node.module or ""]
            for name in names:
                assert not any(name == f or name.startswith(f + ".") for f in FORBIDDEN), \
                    (path.name, name)


def test_proposals_serialise_to_json():
    from rigbench.tuning.balance import BalanceModel, design_lqr, design_pole_placement
    from rigbench.tuning.rules import propose_from_ultimate

    model = BalanceModel(a=8.84, c_prime=0.0625, offset_rad=0.0, tau_e_s=0.008,
                         delay_samples=1, dt_s=0.002)
    props = propose_from_ultimate(8.0, 3.6276, static_gain=1.0)
    props += [design_pole_placement(model), design_lqr(model).pid]
    back = json.loads(json.dumps([p.as_dict() for p in props]))
    zn = next(p for p in back if p["rule"] == "ziegler-nichols-pid")
    assert zn["kp"] == 4.8 and zn["form"]["td_s"] == 3.6276 / 8
    pp = next(p for p in back if p["rule"] == "pole-placement-pi")
    assert pp["margins"]["stable"] is True
    assert len(pp["details"]["closed_loop_poles"]) == 3
