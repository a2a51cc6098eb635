"""The README's autotune flow on the simulated balance rig, end to end: tune, save the
chosen proposal as a whole-rig profile, push it (persisted), then sweep it against the demo
start profile. Every set balances; each set is complete (format 2 profiles, one baseline)."""

import json
from pathlib import Path

from rigbench.cli import main
from rigbench.profiles.model import load_profile

ROOT = Path(__file__).parents[1]


def test_tune_save_push_sweep_runs_without_a_fall(tmp_path, capsys):
    port = f"sim://balance?clock=virtual&seed=3&state={tmp_path / 'board.json'}"
    best = tmp_path / "best.yaml"
    assert main(["tune", "--port", port, "--loop", "tilt", "--save-profile", str(best)]) == 0
    assert "wrote " in capsys.readouterr().out
    prof = load_profile(best)
    # the first recommended design on this rig retunes the trim loop with the tilt loop
    assert prof.loop == "tilt" and prof.provenance.method
    assert set(prof.gains) >= {"tilt_kp", "tilt_ki", "tilt_kd"}
    assert "phase_margin_deg" in prof.provenance.predicted
    assert main(["push", str(best), "--port", port, "--persist"]) == 0
    capsys.readouterr()
    code = main(["sweep", "--port", port, "--gains",
                 str(ROOT / "profiles" / "demo-balance-start.yaml"), "--gains", str(best),
                 "--amplitudes", "0.02,0.04", "--repeats", "2", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0, doc["detail"]
    assert doc["stopped_by"] == "done"
    assert all(s["completed"] and not s["fell"] for s in doc["sets"])
    # the start set ran with its own trim gains, not the pushed design's
    start = doc["sets"][0]
    assert start["applied"]["trim_kp"] == 0.2 and start["applied"]["trim_ki"] == 0.05


def test_save_profile_without_a_recommendation_writes_nothing(tmp_path, capsys):
    # the wheel rig at rest: its relay cycle is far from −180°, no rule applies and the
    # one-point designs exceed the board's integral range: nothing to write
    out = tmp_path / "p.yaml"
    code = main(["tune", "--port", "sim://wheel?clock=virtual&seed=1", "--loop", "speed",
                 "--save-profile", str(out)])
    err = capsys.readouterr().err
    if code == 6:
        assert not out.exists() and "--rule" in err
    else:
        assert code == 0 and load_profile(out).loop == "speed"
