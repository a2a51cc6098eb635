"""Running sequences end to end on the simulated balance rig (virtual clock): the shipped
demo writes its results folder; guards, timeouts, cancel and failed steps end with the motor
off and the documented exit codes; bad files and paths are refused before anything runs."""

import re
import threading
from pathlib import Path

import numpy as np
import pytest
import yaml

from rigbench.cli import main
from rigbench.link import Link
from rigbench.recordings.recording import load_recording
from rigbench.sequences.file import load_sequence
from rigbench.sequences.run import run_sequence
from rigbench.tuning.relay import rising_switches

ROOT = Path(__file__).parents[1]
DEMO = ROOT / "sequences" / "demo-balance-check.yaml"
BAD = ROOT / "tests" / "fixtures" / "sequences_bad"
SIM = "sim://balance?clock=virtual"


def _run_cli(capsys, *args):
    code = main(["run", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def _write(folder: Path, text: str, name: str = "seq.yaml") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / name
    path.write_text(text)
    return path


def _seq(steps: str, *, guards: str = "{tilt_deg: 15, wheel_fraction: 0.8}",
         on_abort: str = "kill", name: str = "test") -> str:
    return (f"sequence: 1\nname: {name}\nport: {SIM}\nguards: {guards}\n"
            f"on_abort: {on_abort}\nsteps:\n{steps}")


def _summary(folder: Path) -> dict:
    return yaml.safe_load((folder / "summary.yaml").read_text())


# ---------------------------------------------------------------------------- the demo


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "results"
    code = main(["run", str(DEMO), "--out", str(out), "--no-plots", "--json"])
    return code, out


def test_shipped_demo_runs_to_the_end_and_writes_its_results(demo_run):
    code, out = demo_run
    s = _summary(out)
    assert code == 0 and s["ok"] and s["stopped_by"] == "done"
    assert s["motor_after"] == "off" and s["checks"] == {"total": 4, "failed": 0}
    assert [st["outcome"] for st in s["steps"]].count("not run") == 0
    names = sorted(p.name for p in out.iterdir())
    for expected in ("summary.yaml", "summary.md", "quiet.csv", "quiet.yaml",
                     "relay-tilt.csv", "relay-tilt.yaml", "sweep-tilt.csv", "sweep-tilt.yaml"):
        assert expected in names
    md = (out / "summary.md").read_text()
    assert md.startswith("# balance check (demo)") and "PASSED" in md
    assert "| 7 | relay.cycles >= 6 | 6 | pass |" in md


def test_demo_recordings_hold_what_the_steps_asked_for(demo_run):
    _, out = demo_run
    s = _summary(out)
    quiet = load_recording(out / "quiet.csv")
    # a 5 s record at the board's 500 Hz: rows = duration x rate (common practice, no source)
    assert abs(len(quiet) - 5 * 500) <= 2 and quiet.complete
    assert quiet.sidecar["board"]["board"] == "sim-balance-1"
    # the relay step's period, checked against the switching instants in its own recording:
    # the mean interval between rising switches over the cycles used
    relay = next(st for st in s["steps"] if st["kind"] == "relay")
    an = relay["data"]["analysis"]
    rec = load_recording(out / relay["recordings"][0])
    # from one sample before the first boundary (a rising switch needs the sample before it)
    sel = (rec.host_time_s >= an["t_start_s"] - 0.003) & (rec.host_time_s <= an["t_end_s"] + 1e-6)
    t = rec.host_time_s[sel][rising_switches(rec.signal("relay")[sel])]
    assert len(t) == an["cycles"] + 1
    assert relay["metrics"]["relay.period_s"] == pytest.approx(np.mean(np.diff(t)), rel=1e-6)
    sweep = next(st for st in s["steps"] if st["kind"] == "sweep")
    pushes = sweep["data"]["pushes"]
    assert [p["amplitude"] for p in pushes] == [0.05] * 3 + [0.1] * 3
    assert sweep["metrics"]["sweep.peak_max"] == pytest.approx(max(p["peak"] for p in pushes))


def test_dry_run_prints_the_expanded_steps_and_sends_nothing(capsys, tmp_path):
    code, out, _ = _run_cli(capsys, ROOT / "sequences" / "demo-wheel-relay.yaml", "--dry-run",
                            "--port", "sim://nowhere")
    assert code == 0
    lines = [ln for ln in out.splitlines() if re.match(r"\d", ln)]
    assert len(lines) == 24 and "dry run: nothing sent" in out
    assert any(re.match(r"10\.3\s+record .*name=after-kp0\.3.*\(line 32\)", ln) for ln in lines)


@pytest.mark.parametrize("path", sorted(BAD.glob("*.yaml")), ids=lambda p: p.stem)
def test_dry_run_of_a_bad_file_names_file_line_and_step(capsys, path):
    expect = path.read_text().splitlines()[0]
    if not expect.startswith("# expect: "):
        pytest.skip("a helper file, not a case")
    line, field = expect[len("# expect: "):].split(" ")[:2]
    code, out, err = _run_cli(capsys, path, "--dry-run")
    assert code == 2 and out == ""
    assert err.startswith(f"rigbench: {path}:{line}: {field}")
    assert len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("profile,words", [
    ("../outside.yaml", "steps out with '..'"),
    ("/etc/passwd", "is absolute"),
    ("profiles/link.yaml", "leads outside the project folder"),
])
def test_sequences_cannot_reach_outside_their_folder(capsys, tmp_path, profile, words):
    outside = tmp_path / "outside.yaml"
    outside.write_text((ROOT / "profiles" / "demo-balance-start.yaml").read_text())
    proj = tmp_path / "proj"
    (proj / "profiles").mkdir(parents=True)
    (proj / "profiles" / "link.yaml").symlink_to(outside)
    path = _write(proj / "sequences", _seq(f"  - push: {profile}\n"))
    code, _, err = _run_cli(capsys, path, "--dry-run")
    assert code == 2 and words in err and f"{path}:7: steps[1].push.profile" in err


def test_recording_names_stay_plain_and_cannot_take_the_summary(capsys, tmp_path):
    for name, words in (("../up", "plain file name"), ("summary", "run's own summary")):
        path = _write(tmp_path / name.strip("./"), _seq(f"  - record: {{seconds: 1, name: '{name}'}}\n"))
        code, _, err = _run_cli(capsys, path, "--dry-run")
        assert code == 2 and words in err and ":7: steps[1].record.name" in err


def test_a_results_folder_that_holds_files_is_refused(capsys, tmp_path):
    out = tmp_path / "used"
    out.mkdir()
    (out / "keep.txt").write_text("earlier results")
    code, _, err = _run_cli(capsys, DEMO, "--out", out)
    assert code == 2 and "not an empty folder" in err
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]


# ---------------------------------------------------------------------------- stops


def test_a_tripped_guard_kills_and_exits_5(capsys, tmp_path):
    # a step's own guard (|tilt| 1.5°, the rig rests near 1°) and body pushes that lean it
    # further than that: the host guard kills (PROTOCOL.md §7.1), the run stops there
    steps = ("  - arm\n  - hold\n  - wait: 1\n"
             "  - sweep: {loop: tilt, shape: pulse, at: body, amplitudes: [0.1, -0.1], "
             "repeats: 2, spacing_s: 2, time_s: 0.05, guards: {tilt_deg: 1.5}}\n"
             "  - check: sweep.fell <= 0\n  - disarm\n")
    path = _write(tmp_path, _seq(steps, on_abort="disarm"))
    code, out, _ = _run_cli(capsys, path, "--out", tmp_path / "res", "--no-plots")
    s = _summary(tmp_path / "res")
    assert code == 5 and s["stopped_by"] == "guard" and s["stopping_step"] == "4"
    assert "|tilt|" in s["detail"] and s["fell"] == 1 and s["trips"] >= 1
    assert s["motor_after"] == "tripped"   # the kill latched a fault: the motor is off
    assert [st["outcome"] for st in s["steps"]][3:] == ["failed", "not run", "not run"]
    assert s["steps"][3]["metrics"]["sweep.fell"] >= 1
    assert "stopped (guard) at step 4" in out


def test_a_relay_too_large_for_its_bound_ends_with_the_motor_off(tmp_path):
    # relay amplitude 4° on the integral channel swings the rig by about ±3°: over a
    # board bound of 2° the board trips (relay_bound, PROTOCOL.md §8.1) or the guard does
    steps = ("  - arm\n  - hold\n  - wait: 1\n"
             "  - relay: {loop: tilt, amplitude: 4, hysteresis: 0.1, bound: 2, max_s: 10}\n"
             "  - disarm\n")
    seq = load_sequence(_write(tmp_path, _seq(steps, guards="{tilt_deg: 3.5}")))
    with Link.open(SIM) as link:
        result = run_sequence(link, sequence=seq, results_dir=tmp_path / "res")
        link.sleep(0.05)  # a loop period or more for the board to act
        board = link.port.board
        assert board.motor in ("off", "tripped") and board.signals["cmd"] == 0.0
    assert result.stopped_by == "guard" and result.stopping_step == "4"
    assert result.motor_after == "tripped" and result.trips >= 1
    assert any(w in result.detail for w in ("relay_bound", "|tilt|", "tilt_limit"))


def test_a_failing_check_runs_on_and_exits_6(capsys, tmp_path):
    steps = ("  - arm\n  - hold\n  - wait: 1\n"
             "  - relay: {loop: tilt, amplitude: 1, hysteresis: 0.1, bound: 8, max_s: 20, "
             "cycles: 4}\n"
             "  - check: relay.period_s < 0.1\n  - check: relay.cycles >= 4\n  - disarm\n")
    path = _write(tmp_path, _seq(steps))
    code, _, _ = _run_cli(capsys, path, "--out", tmp_path / "res", "--no-plots")
    s = _summary(tmp_path / "res")
    assert code == 6 and s["stopped_by"] == "done" and not s["ok"]
    assert s["checks"] == {"total": 2, "failed": 1} and s["motor_after"] == "off"
    assert [st["outcome"] for st in s["steps"]] == ["ok"] * 4 + ["failed", "passed", "ok"]
    first = s["steps"][4]["check"]
    assert not first["passed"] and first["measured"] == s["steps"][3]["metrics"]["relay.period_s"]


def test_a_step_over_its_timeout_stops_and_disarms(tmp_path):
    steps = "  - arm\n  - hold\n  - wait: {seconds: 5, timeout_s: 0.5}\n  - disarm\n"
    seq = load_sequence(_write(tmp_path, _seq(steps, on_abort="disarm")))
    with Link.open(SIM) as link:
        result = run_sequence(link, sequence=seq, results_dir=tmp_path / "res")
        link.sleep(0.05)  # a loop period or more for the board to act
        assert link.status().motor == "off" and link.port.board.signals["cmd"] == 0.0
    assert (result.stopped_by, result.stopping_step) == ("timeout", "3")
    assert result.abort_action == "disarm" and result.motor_after == "off"


def test_cancel_from_the_progress_callback_stops_in_the_callers_thread(tmp_path):
    steps = "  - arm\n  - hold\n  - wait: 3\n  - record: {seconds: 3, name: late}\n  - disarm\n"
    proj = tmp_path / "proj"
    seq = load_sequence(_write(proj / "sequences", _seq(steps, on_abort="disarm")))
    flag, threads, seen = threading.Event(), set(), []

    def progress(p):
        threads.add(threading.get_ident())
        seen.append((p.index, p.state))
        if p.kind == "wait" and p.state == "running" and p.elapsed_s > 1.0:
            flag.set()

    with Link.open(SIM) as link:
        # as the UI calls it: a cancel function, no results folder named
        result = run_sequence(link, sequence=seq, cancel=flag.is_set, progress=progress)
        assert link.status().motor == "off"
    assert threads == {threading.get_ident()}
    assert result.stopped_by == "cancelled" and result.stopping_step == "3"
    assert result.results_dir.parent == proj / "results"
    assert result.results_dir.name.startswith("test-")
    assert not (result.results_dir / "late.csv").exists()
    assert ("1", "start") in seen and seen[-1][1] == "end"


def test_a_sequence_that_does_not_fit_the_board_sends_nothing(capsys, tmp_path):
    steps = "  - arm\n  - hold\n  - relay: {loop: pitch, amplitude: 1, hysteresis: 0.1, " \
            "bound: 8, max_s: 5}\n  - disarm\n"
    path = _write(tmp_path, _seq(steps))
    code, out, _ = _run_cli(capsys, path, "--out", tmp_path / "res", "--no-plots")
    s = _summary(tmp_path / "res")
    assert code == 4 and s["stopped_by"] == "refused" and s["stopping_step"] is None
    assert f"{path}:9: steps[3].relay.loop" in s["detail"]
    assert [st["outcome"] for st in s["steps"]] == ["not run"] * 4
    assert s["motor_after"] == "off"


def test_a_lost_link_stops_the_run_with_exit_3(capsys, tmp_path):
    # the simulated board's USB goes away 2 s in: the host cannot switch the motor off any
    # more, the board's watchdog does (PROTOCOL.md §7.2); the summary says so
    text = _seq("  - arm\n  - hold\n  - wait: 5\n  - disarm\n").replace(
        SIM, "sim://balance?clock=virtual&unplug=2")
    path = _write(tmp_path, text)
    code, _, err = _run_cli(capsys, path, "--out", tmp_path / "res", "--no-plots")
    s = _summary(tmp_path / "res")
    assert code == 3 and s["stopped_by"] == "lost" and s["stopping_step"] == "3"
    assert s["motor_after"].startswith("unknown (link lost")


def test_every_step_kind_has_one_action_and_the_run_gives_what_steps_use():
    # the step vocabulary (sequences/README.md) and the dispatch table are one set;
    # repeat is unrolled into set + its steps before the run (expand)
    import inspect

    from rigbench.sequences.execute import STEP_ACTIONS, RunState, StepRunner
    from rigbench.sequences.file import STEP_KINDS
    from rigbench.sequences.run import _Run
    assert set(STEP_ACTIONS) == set(STEP_KINDS) - {"repeat"}
    assert all(inspect.getattr_static(StepRunner, f.__name__) is f
               for f in STEP_ACTIONS.values())
    # what the protocol names, the run provides (attributes set in __init__, methods)
    names = [n for n in RunState.__annotations__] + ["report"]
    source = inspect.getsource(_Run)
    missing = [n for n in names if f"self.{n}" not in source and f"def {n}(" not in source]
    assert not missing, missing
def test_a_clear_step_lets_a_sequence_run_after_a_kill(tmp_path):
    # PROTOCOL.md §7.3: after a kill `arm` is refused (interlock fault) until `clear`;
    # clearing leaves the motor off and a new `arm` is needed
    refused = load_sequence(_write(tmp_path, _seq("  - arm\n  - hold\n  - disarm\n"),
                                   name="a.yaml"))
    cleared = load_sequence(_write(tmp_path, _seq("  - clear\n  - arm\n  - hold\n"
                                                  "  - wait: 0.5\n  - disarm\n"), name="b.yaml"))
    with Link.open(SIM) as link:
        link.kill()
        link.sleep(0.05)
        first = run_sequence(link, sequence=refused, results_dir=tmp_path / "r1")
        assert first.stopped_by == "refused" and "clear" in first.detail
        second = run_sequence(link, sequence=cleared, results_dir=tmp_path / "r2")
        assert link.status().fault is None
    assert second.stopped_by == "done" and second.motor_after == "off"
    assert second.steps[0].detail == "motor off (fault cleared)"
