"""Disturbance sweeps: metrics against python-control, falls, restoring the gains."""

import control
import numpy as np
import pytest

from rigbench.experiments.sweep import GainSet, gain_set, run_sweep


def test_setpoint_step_iae_matches_python_control(open_sim):
    link = open_sim("sim://plant?num=1&den=0.2,1&noise=0")
    sets = [GainSet("slow", {"main_kp": 0.5, "main_ki": 2.0, "main_kd": 0.0}),
            GainSet("brisk", {"main_kp": 1.0, "main_ki": 5.0, "main_kd": 0.0})]
    sw = run_sweep(link, sets, amplitudes=(0.1, 0.2), repeats=1, kind="step", at="setpoint",
                   settle_s=3.0)
    assert sw.stopped_by == "done"
    h, T = 0.002, 3.0
    for gs in sets:
        kp, ki = gs.values["main_kp"], gs.values["main_ki"]
        # reference: the board's discrete loop (backward-Euler integral, u[k] held over the
        # next period) around the plant discretised with a zero-order hold, python-control
        z = control.tf([1.0, 0.0], [1.0], h)
        c = kp + ki * h * z / (z - 1)
        p = control.c2d(control.tf([1.0], [0.2, 1.0]), h, "zoh")
        t = np.arange(0.0, T, h)
        _, e = control.step_response(control.feedback(1, c * p), t)
        iae = 0.1 * float(np.sum(np.abs(e[:-1])) * h)
        res = sw.by_name(gs.name)
        assert res.completed and not res.fell
        first, second = res.injections
        # the same response as python-control's, to 0.5%
        assert first.metrics.iae == pytest.approx(iae, rel=0.005)
        # the second (−0.2, signs alternate): twice the reference, give or take the tail of
        # the first one's return still decaying (the slow set's pole at −1.7/s): 3%
        assert second.amplitude == -0.2
        assert second.metrics.iae == pytest.approx(2 * iae, rel=0.03)
        assert res.summary["iae"].count == 2
        assert res.by_amplitude[0.1]["iae"].mean == pytest.approx(first.metrics.iae)
    # the original gains came back
    assert link.get("main_kp", "main_ki", "main_kd") == {"main_kp": 0.5, "main_ki": 0.25,
                                                         "main_kd": 0.0}


def test_a_fall_is_recorded_and_the_sweep_goes_on_when_asked(open_sim):
    link = open_sim("sim://balance?seed=7")
    start = link.get("tilt_kp", "tilt_ki", "tilt_kd")
    # P alone never stabilises the speed-drive tilt loop (docs/METHODS.md §4 [calc])
    bad = {"tilt_kp": 0.3, "tilt_ki": 0.0, "tilt_kd": 0.0}
    sw = run_sweep(link, [("start", start), ("p only", bad), ("start again", start)],
                   amplitudes=(0.02,), repeats=1, settle_s=1.0, rearm_after_fall=True)
    assert sw.stopped_by == "done"
    assert sw.by_name("p only").fell and not sw.by_name("p only").completed
    assert sw.by_name("start").completed and sw.by_name("start again").completed
    assert not sw.by_name("start again").fell
    assert link.get(*start) == pytest.approx(start)
    assert link.status().motor == "off"


def test_a_fall_ends_the_sweep_by_default(open_sim):
    link = open_sim("sim://balance?seed=7")
    start = link.get("tilt_kp", "tilt_ki", "tilt_kd")
    sw = run_sweep(link, [("p only", {"tilt_kp": 0.3, "tilt_ki": 0.0}), ("start", start)],
                   amplitudes=(0.02,), repeats=1, settle_s=1.0)
    assert sw.stopped_by == "fell" and sw.by_name("p only").fell
    assert sw.by_name("start").injections == []
    st = link.status()
    assert st.motor == "tripped" and link.port.board.signals["cmd"] == 0.0
    assert link.get(*start) == pytest.approx(start)  # restored even after the fall


def test_gain_sets_from_dicts_profiles_and_bad_input(open_sim):
    assert gain_set({"a": 1}, "x") == GainSet("x", {"a": 1.0})
    with pytest.raises(TypeError):
        gain_set(3)
    with pytest.raises(ValueError):
        gain_set({})
    link = open_sim("sim://balance")
    with pytest.raises(ValueError, match="no parameter"):
        run_sweep(link, [{"tilt_kq": 1.0}], loop="tilt")
    with pytest.raises(ValueError):
        run_sweep(link, [{"tilt_kp": 1.0}], kind="ramp")


def test_every_set_is_completed_from_one_baseline_not_from_the_set_before(open_sim):
    # common practice, no source: a comparison is only fair when every set runs with every
    # other gain equal, so a set that leaves a gain out gets the baseline's value
    link = open_sim("sim://balance?seed=3")
    boot = link.get("tilt_kp", "tilt_ki", "tilt_kd", "trim_kp", "trim_ki")
    cascade = {**{k: boot[k] for k in ("tilt_kp", "tilt_ki", "tilt_kd")},
               "trim_kp": boot["trim_kp"] * 1.5, "trim_ki": boot["trim_ki"] * 1.5}
    tilt_only = {k: boot[k] for k in ("tilt_kp", "tilt_ki", "tilt_kd")}
    sw = run_sweep(link, [("cascade", cascade), ("tilt only", tilt_only)], loop="tilt",
                   amplitudes=(0.02,), repeats=1, settle_s=1.0)
    assert sw.stopped_by == "done"
    second = sw.by_name("tilt only")
    # what the board applied for the second set: the boot trim gains, not the cascade's
    assert second.applied["trim_kp"] == pytest.approx(boot["trim_kp"])
    assert second.applied["trim_ki"] == pytest.approx(boot["trim_ki"])
    assert second.values["trim_kp"] == pytest.approx(boot["trim_kp"])
    assert sw.by_name("cascade").applied["trim_kp"] == pytest.approx(boot["trim_kp"] * 1.5)
    # a declared baseline replaces the board's start values for what a set leaves out
    # (first the wheel runs down: the interlock arms only with the wheel nearly stopped)
    assert link.wait_until(lambda: link.last_status is not None
                           and not link.last_status.why, 20.0)
    sw = run_sweep(link, [("cascade", cascade), ("tilt only", tilt_only)], loop="tilt",
                   amplitudes=(0.02,), repeats=1, settle_s=1.0,
                   baseline={"trim_kp": boot["trim_kp"] * 0.8})
    assert sw.by_name("tilt only").applied["trim_kp"] == pytest.approx(boot["trim_kp"] * 0.8)
    assert link.get("trim_kp")["trim_kp"] == pytest.approx(boot["trim_kp"])  # restored
@pytest.mark.parametrize("how", ["link", "byte", "framed"])
def test_a_kill_during_a_rearming_sweep_ends_it_with_the_motor_tripped(open_sim, how):
    # re-arming after a fall is asked for; a kill a person caused must end the sweep
    # whatever the way it reached the board: this program's kill (a key, a signal, a
    # `rigbench kill` passed on), a bare kill byte, or the framed kill from elsewhere
    link = open_sim("sim://balance?seed=7")
    start = link.get("tilt_kp", "tilt_ki", "tilt_kd")
    fired = []

    def progress(p):
        if p.phase == "sweep" and not fired:
            fired.append(link.now())
            if how == "link":
                link.kill()
            elif how == "byte":
                link.port.write(b"\x18")          # not through the link: no user count
            else:
                link.port.board.receive(b"@kill 60000|" + b"%04X" % _crc(b"kill 60000") + b"\n")

    sw = run_sweep(link, [("start", start), ("again", start), ("third", start)],
                   amplitudes=(0.02,), repeats=2, settle_s=1.0, rearm_after_fall=True,
                   progress=progress)
    assert fired and sw.stopped_by == "trip" and "kill" in sw.detail
    assert not sw.by_name("third").injections
    link.sleep(0.05)
    assert link.status().motor == "tripped" and link.status().fault == "kill"
    assert link.port.board.signals["cmd"] == 0.0


def _crc(body: bytes) -> int:
    from rigbench.wire.crc import crc16
    return crc16(body)
