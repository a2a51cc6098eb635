"""``rigbench tune`` and ``rigbench sweep`` end to end on simulated boards (virtual clock)."""

import json
from pathlib import Path

import pytest

from rigbench.cli import main

ROOT = Path(__file__).resolve().parents[2]
PLANT = "sim://plant?num=1&den=1,2,1&delay=0.5&clock=virtual&seed=1"


def _json(capsys, argv):
    code = main(argv)
    out = capsys.readouterr().out
    return code, json.loads(out)


def test_tune_json_has_the_documented_keys(capsys, tmp_path):
    code, doc = _json(capsys, ["tune", "--port", PLANT, "--json", "--out", str(tmp_path)])
    assert code == 0
    # README.md, Autotune a live rig: the keys scripts rely on
    for key in ("loop", "ku", "tu_s", "relay", "oscillation", "point", "proposals"):
        assert key in doc
    assert set(doc["relay"]) >= {"amplitude", "hysteresis", "bias"}
    assert set(doc["oscillation"]) >= {"amplitude", "period_s", "cycles"}
    assert set(doc["point"]) >= {"gain", "phase_deg", "omega_rad_s"}
    rules = {p["rule"]: p for p in doc["proposals"]}
    zn = rules["ziegler-nichols-pid"]
    assert set(zn) >= {"rule", "kp", "ki", "kd", "form", "margins", "applies", "reason"}
    assert zn["applies"] and zn["form"] == "parallel"
    assert set(zn["margins"]) >= {"gain_margin", "phase_margin_deg"}
    # e^{-0.5s}/(s+1)^2: Ku 4.6879, Tu 3.2718 s (docs/METHODS.md §3 [calc]); the rules use the
    # model's ultimate point, so Z-N PID kp = 0.6 Ku within 3%
    assert zn["kp"] == pytest.approx(0.6 * 4.6879, rel=0.03)
    assert doc["tu_s"] == pytest.approx(3.2718, rel=0.03)
    assert (tmp_path / "tune.json").exists() and (tmp_path / "tune.md").exists()
    assert Path(doc["recording"]).parent == tmp_path


def test_tune_text_on_the_balance_rig_says_rules_do_not_apply(capsys):
    code = main(["tune", "--port", "sim://balance?clock=virtual&seed=3", "--loop", "tilt"])
    out = capsys.readouterr().out
    assert code == 0
    # docs/METHODS.md §4: the ultimate-point rules do not apply to the unstable tilt loop
    assert "does not apply" in out and "ziegler-nichols-pid: no ultimate point" in out
    assert "pole-placement-pid" in out and "[SIMULATED]" in out


def test_tune_usage_and_refusal_exit_codes(capsys):
    assert main(["tune", "--port", "sim://balance?clock=virtual"]) == 2  # two loops: name one
    assert "--loop" in capsys.readouterr().err
    assert main(["tune", "--port", "sim://balance?clock=virtual", "--loop", "nope"]) == 2
    # a relay that cannot form a cycle in the time given: exit 6 (a check failed)
    code, doc = _json(capsys, ["tune", "--port", PLANT, "--json", "--max-seconds", "2"])
    assert code == 6 and doc["converged"] is False and doc["stopped_by"] == "gave_up"


def test_sweep_with_a_profile_and_inline_gains(capsys):
    start = ROOT / "profiles" / "demo-balance-start.yaml"
    code, doc = _json(capsys, ["sweep", "--port", "sim://balance?clock=virtual&seed=2",
                               "--gains", str(start),
                               "--gains", "firm:tilt_kp=1.24,tilt_ki=17.3,tilt_kd=0.0089",
                               "--amplitudes", "0.02", "--repeats", "2", "--settle", "1.5",
                               "--json"])
    # README.md, Commands (sweep: metrics per gain set); both sets balance
    # the demo rig (docs/METHODS.md §6 start gains; a pole-placement set), common practice
    assert code == 0 and doc["stopped_by"] == "done"
    names = [s["name"] for s in doc["sets"]]
    assert names == ["balance start (demo)", "firm"]
    for s in doc["sets"]:
        assert s["completed"] and not s["fell"]
        assert s["summary"]["iae"]["count"] == 2 and s["summary"]["iae"]["mean"] > 0
    assert doc["restored"]["tilt_kp"] == pytest.approx(0.64)


def test_sweep_fall_exits_5_and_bad_gains_exit_2(capsys):
    # P alone never stabilises the speed-drive tilt loop (docs/METHODS.md §4 [calc]): it falls
    code = main(["sweep", "--port", "sim://balance?clock=virtual",
                 "--gains", "tilt_kp=0.3,tilt_ki=0", "--amplitudes", "0.02", "--repeats", "1"])
    assert code == 5 and "FELL" in capsys.readouterr().out
    assert main(["sweep", "--port", "sim://balance?clock=virtual", "--gains", "tilt_kp=x"]) == 2
    assert main(["sweep", "--port", "sim://balance?clock=virtual",
                 "--gains", "tilt_kq=1"]) == 2
    assert "no parameter" in capsys.readouterr().err


def test_progress_bar_draws_only_on_a_terminal():
    import io

    from rigbench.commands._progress import ProgressBar
    from rigbench.experiments.runner import Progress

    p = Progress("relay tilt", "relay", 3.5, 60.0, 0.5, cycles=2, cycles_needed=4,
                 estimate={"period_s": 0.24, "amplitude": 0.35})
    tty = io.StringIO()
    tty.isatty = lambda: True
    bar = ProgressBar(tty)
    bar(p)
    bar.close()
    text = tty.getvalue()
    # one line redrawn in place (common practice, no source), half full at fraction 0.5
    assert text.startswith("\r") and text.endswith("\n") and "2/4" in text
    assert "[" + "#" * 12 + "." * 12 + "]" in text and "period 0.24 s" in text
    pipe = io.StringIO()
    ProgressBar(pipe)(p)
    assert pipe.getvalue() == ""
