"""The command line rides through a noisy line with its default settings: at 0.3 % of bytes
bit-flipped (both directions) `tune` and `run` finish on the simulated balance rig. The
figure over 10 seeds is scripts/noisy_line.py's (docs/FAULTS.md); here one seed each."""

from pathlib import Path

import yaml

from rigbench.cli import main

ROOT = Path(__file__).parents[2]
URL = "sim://balance?clock=virtual&corrupt=0.003&seed={seed}"


def test_tune_finishes_on_a_line_that_damages_one_frame_in_three(capsys):
    code = main(["tune", "--port", URL.format(seed=2), "--loop", "tilt"])
    out, err = capsys.readouterr()
    assert code == 0, err or out
    assert "oscillation: period" in out


def test_run_finishes_on_a_noisy_line_with_the_motor_off(tmp_path, capsys):
    code = main(["run", str(ROOT / "sequences" / "demo-balance-check.yaml"), "--port",
                 URL.format(seed=4), "--out", str(tmp_path / "r"), "--no-plots"])
    out, err = capsys.readouterr()
    assert code == 0, err or out[-500:]
    summary = yaml.safe_load((tmp_path / "r" / "summary.yaml").read_text())
    assert summary["stopped_by"] == "done" and summary["motor_after"] == "off"
