"""The guarded runner: guards kill and leave the motor off, cancel leaves the rig safe,
arming goes through the interlock (simulated balance rig, virtual clock)."""

import threading

import pytest

from rigbench.experiments.relay import run_relay
from rigbench.experiments.runner import ArmRefused, Experiment, Guards, guard_limits


def _motor_output_off(link):
    board = link.port.board
    return board.motor in ("off", "tripped") and board.signals["cmd"] == 0.0


def test_guard_trip_kills_and_the_motor_ends_off(open_sim):
    link = open_sim("sim://balance?seed=4")
    # a host guard well inside the board's trip: |tilt| of 1.5° (PROTOCOL.md §7: the host
    # stops before the board has to; common practice, no source)
    run = run_relay(link, "tilt", amplitude=3.0, hysteresis=0.05, max_s=20.0,
                    guards=Guards(limits={"tilt": 1.5}))
    res = run.experiment
    assert run.stopped_by == "guard" and res.killed
    assert "tilt" in run.reason
    link.sleep(0.05)
    assert link.status().motor == "tripped" and link.status().fault == "kill"
    assert _motor_output_off(link)
    # the record ends at the trip: the last rows crossed the guard, none went further on
    assert max(abs(res.column("tilt"))) > 1.5
    assert any(e.kind == "trip" and e.get("cause") == "kill" for e in
               link.events_since(0)[1])


def test_board_trip_event_stops_the_experiment(open_sim):
    link = open_sim("sim://balance?seed=4")
    link.set(trip_tilt=1.2)
    # guard at the trip itself: the board's own trip event comes first
    # PROTOCOL.md §6.3, §7.3: a trip switches the motor off, latches, and is announced
    run = run_relay(link, "tilt", amplitude=3.0, hysteresis=0.05, max_s=20.0,
                    guards=Guards(trip_fraction=1.0))
    st = link.status()
    assert run.stopped_by == "trip" and st.fault in run.reason  # relay_bound or tilt_limit
    assert st.motor == "tripped" and _motor_output_off(link)


def test_cancel_leaves_the_motor_off_when_found_off(open_sim):
    link = open_sim("sim://balance?seed=5")
    cancel = threading.Event()

    def progress(p):
        if p.phase == "relay" and p.cycles >= 1:
            cancel.set()  # like a person pressing cancel mid-relay

    run = run_relay(link, "tilt", cancel=cancel, progress=progress, max_s=30.0)
    # README.md, Autotune a live rig (common practice, no source): cancel ends in an orderly way,
    # the motor back off as found, no latched fault
    assert run.stopped_by == "cancelled" and not run.experiment.killed
    st = link.status()
    assert (st.motor, st.mode, st.fault) == ("off", "off", None)
    link.sleep(0.05)
    assert _motor_output_off(link)


def test_cancel_returns_to_the_closed_loop_it_found(open_sim):
    link = open_sim("sim://balance?seed=5")
    link.arm()
    link.mode("hold")
    link.sleep(1.0)
    cancel = threading.Event()
    run = run_relay(link, "tilt", cancel=cancel, max_s=30.0,
                    progress=lambda p: p.phase == "relay" and cancel.set())
    assert run.stopped_by == "cancelled"
    # back in the closed loop it was found in (brief; common practice, no source)
    st = link.status()
    assert (st.motor, st.mode) == ("running", "hold")
    link.sleep(2.0)  # and it still balances
    assert abs(link.snapshot(rows=1).column("tilt")[0]) < 5.0


def test_latched_fault_refuses_and_nothing_runs(open_sim):
    link = open_sim("sim://balance")
    link.kill()
    link.sleep(0.1)
    # PROTOCOL.md §7.3: with a latched fault arming is refused; it is not cleared for you
    with pytest.raises(ArmRefused) as info:
        with Experiment(link, name="x") as exp:
            exp.hold()
    assert info.value.reasons == ("fault",)
    assert link.status().motor == "tripped"


def test_interlock_refusal_carries_the_board_reasons(open_sim):
    link = open_sim("sim://balance")
    link.port.board.hand_tilt_deg = 8.0   # the hand holds the rig well off upright
    link.sleep(0.5)
    exp = Experiment(link, name="x")
    with pytest.raises(ArmRefused) as info:
        with exp:
            exp.hold()
    # PROTOCOL.md §7.3: the refusal names the failing conditions
    assert "tilt" in info.value.reasons
    assert link.status().motor == "off"


def test_lost_link_stops_with_lost(open_sim):
    link = open_sim("sim://balance?unplug=4")
    with Experiment(link, name="unplug") as exp:
        exp.hold()
        exp.wait(10.0)
    # README.md, Autotune a live rig: a lost link ends the experiment (the board's watchdog then
    # turns the motor off, PROTOCOL.md §7.2)
    assert exp.result.stopped_by == "lost"


def test_stale_telemetry_kills(open_sim):
    link = open_sim("sim://balance?stall=3:1")
    with Experiment(link, name="stall", guards=Guards(stale_s=0.3)) as exp:
        exp.hold()
        exp.wait(10.0)
    # README.md, Autotune a live rig: stale telemetry trips the guard and kills
    assert exp.result.stopped_by == "stale" and exp.result.killed
    link.sleep(1.5)  # the board acts on the kill once it runs again
    assert link.status().motor == "tripped"


def test_guard_limits_follow_the_trip_parameters(open_sim):
    link = open_sim("sim://balance")
    # PROTOCOL.md §5.2: trip_<signal> parameters name the limits; the board's are 20° and
    # 45 rev/s (rigbench.rig.firmware.boards), the guards half of that here
    lim = guard_limits(link, Guards(trip_fraction=0.5, limits={"rate": 300.0}))
    assert lim == {"tilt": 10.0, "wheel": 22.5, "rate": 300.0}
    with pytest.raises(ValueError):
        guard_limits(link, Guards(limits={"nonsense": 1.0}))


def test_results_dir_records_csv_and_sidecar(open_sim, tmp_path):
    link = open_sim("sim://balance?seed=6")
    with Experiment(link, name="hold a while", results_dir=tmp_path) as exp:
        exp.hold()
        exp.wait(1.0)
    res = exp.result
    assert res.stopped_by == "done" and res.recording == tmp_path / "hold-a-while.csv"
    from rigbench.recordings.recording import load_recording
    rec = load_recording(res.recording)  # README.md, Record and replay: CSV + YAML sidecar
    assert len(rec) == pytest.approx(len(res.t_s), abs=5)
    assert link.status().motor == "off"


def test_a_kill_that_cannot_be_sent_is_logged(open_sim, monkeypatch, caplog):
    # the board's watchdog is then the only stop (PROTOCOL.md §7.2): say so in the log
    from rigbench.link import LinkLost
    link = open_sim("sim://balance?stall=3:1")

    def gone():
        raise LinkLost("port went away")

    with caplog.at_level("WARNING", logger="rigbench.experiments.runner"):
        with Experiment(link, name="stall", guards=Guards(stale_s=0.3)) as exp:
            exp.hold()
            monkeypatch.setattr(link, "kill", gone)
            monkeypatch.setattr(link, "kill_confirmed", lambda **kw: gone())
            exp.wait(10.0)
    assert exp.result.stopped_by == "stale"
    assert any("kill not sent" in r.getMessage() for r in caplog.records)
