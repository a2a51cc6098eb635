"""Several loops closed at once (rigbench.tuning.multiloop): the speed-drive balance rig with
its tilt PID and the wheel-speed trim loop that moves the tilt set-point, each loop broken
in turn with the other closed, against python-control's ``interconnect`` in state space."""

import math

import control
import numpy as np
import pytest

from rigbench.tuning.loop import LoopController, PlantModel
from rigbench.tuning.margins import margins
from rigbench.tuning.multiloop import FeedbackLoop, multiloop_margins, multiloop_transfer
from rigbench.tuning.sampled import sample_ss, sample_tf

from ss_reference import RefLoop, ref_margins, shift_register

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")

# docs/METHODS.md §6 demo rig (our own numbers) [calc]: speed drive, a = √(mgl/Jt),
# c = Jw/Jt, driver lag 8 ms, 500 Hz, one sample of dead time in the drive
A_POLE, C_W, TAU_E, H = 8.84, 0.0625, 0.008, 0.002
# boot gains of §6 in SI: tilt 0.64 (rev/s)/deg = 230.4 s⁻¹, 9.9 (rev/s)/(deg·s) = 3564 s⁻²;
# trim 0.2 deg/(rev/s) = 0.2/360 rad/(rad/s), 0.05 deg/rev = 0.05/360 rad/rad
TILT = dict(kp=230.4, ki=3564.0, kd=2.0, tf=0.005)
TRIM = dict(kp=0.2 / 360, ki=0.05 / 360)


def balance_matrices():
    """θ̈ = a²θ − c·ẇ, τe·ẇ = u − w: states (θ, θ̇, w), outputs tilt, rate, wheel
    (docs/METHODS.md §4, speed drive)."""
    a = np.array([[0.0, 1.0, 0.0], [A_POLE ** 2, 0.0, C_W / TAU_E], [0.0, 0.0, -1.0 / TAU_E]])
    b = np.array([[0.0], [-C_W / TAU_E], [1.0 / TAU_E]])
    return a, b, np.eye(3), np.zeros((3, 1))


def rig_plant():
    return sample_ss(*balance_matrices(), H, delays_s=[H], inputs=("cmd",),
                     outputs=("tilt", "rate", "wheel"))


def loops(trim=True):
    out = [FeedbackLoop("tilt", LoopController(TILT["kp"], TILT["ki"], TILT["kd"], TILT["tf"],
                                               h_s=H, direct_acting=True),
                        measure="tilt", drives="cmd", rate="rate")]
    if trim:
        # reverse acting on e = 0 − w: θsp = −(kp·w + ki·∫w) (docs/METHODS.md §4 sign)
        out.append(FeedbackLoop("trim", LoopController(TRIM["kp"], TRIM["ki"], h_s=H),
                                measure="wheel", drives="tilt"))
    return out


def reference(break_at):
    """python-control: plant sampled by c2d with one register of dead time, the board's
    PIDs from their difference equations, wired by name with ``interconnect``; the loop
    broken at the tilt controller's output ('cmd') or the trim's ('tilt set-point')."""
    z = control.tf([1.0, 0.0], [1.0], H)
    a, b, c, d = balance_matrices()
    plant = control.c2d(control.ss(a, b, c, d), H, "zoh") * shift_register(1, H)
    cmd_in = "v" if break_at == "cmd" else "cmd"
    sp_in = "v" if break_at == "sp" else "tilt_sp"
    plant = control.ss(plant, inputs=[cmd_in], outputs=["tilt", "rate", "wheel"])
    e_tilt = control.summing_junction(inputs=["tilt", "-" + sp_in], output="e_tilt", dt=H)
    pi_tilt = control.ss(TILT["kp"] + TILT["ki"] * H * z / (z - 1), inputs="e_tilt",
                         outputs="u_pi")
    af = TILT["tf"] / (TILT["tf"] + H)
    d_tilt = control.ss(TILT["kd"] * (1 - af) * z / (z - af), inputs="rate", outputs="u_d")
    u_sum = control.summing_junction(inputs=["u_pi", "u_d"], output="cmd_out", dt=H)
    e_wheel = control.summing_junction(inputs=["-wheel"], output="e_wheel", dt=H)
    pi_trim = control.ss(TRIM["kp"] + TRIM["ki"] * H * z / (z - 1), inputs="e_wheel",
                         outputs="tilt_sp_out")
    # close the unbroken connection by naming: the unbroken signal's producer output feeds
    # its reader
    if break_at == "cmd":
        pi_trim = control.ss(pi_trim, inputs="e_wheel", outputs="tilt_sp")
        out = "cmd_out"
    else:
        u_sum = control.summing_junction(inputs=["u_pi", "u_d"], output="cmd", dt=H)
        out = "tilt_sp_out"
    sysl = control.interconnect([plant, e_tilt, pi_tilt, d_tilt, u_sum, e_wheel, pi_trim],
                                inplist=["v"], outlist=[out], check_unused=False)
    return RefLoop(-control.ss(sysl.A, sysl.B, sysl.C, sysl.D, H), 0, H)


def check(m, ref, tol=1e-4):
    assert m.stable == ref.stable
    assert m.phase_margin_deg == pytest.approx(ref.pm_deg, rel=tol)
    for mine, theirs in ((m.gain_margin_upper, ref.gm_upper), (m.gain_margin_lower, ref.gm_lower)):
        assert (mine is None) == (theirs is None)
        if theirs is not None:
            assert mine == pytest.approx(theirs, rel=tol)
    assert m.ms == pytest.approx(ref.ms, rel=tol)


@pytest.mark.parametrize("break_at, name", [("cmd", "tilt"), ("sp", "trim")])
def test_balance_rig_margins_with_the_other_loop_closed_match_python_control(break_at, name):
    m = multiloop_margins(rig_plant(), loops(), name)
    ref = ref_margins(reference(break_at), lo=1e-10 * math.pi / H)
    assert ref.stable and m.drift_modes == 0
    check(m, ref)
    # the tilt loop of an unstable plant has a lower gain margin (docs/METHODS.md §4)
    if name == "tilt":
        assert m.gain_margin_lower is not None and m.gain_margin_lower < 1


def test_tilt_loop_alone_has_the_drift_mode_and_the_trim_loop_removes_it():
    alone = multiloop_transfer(rig_plant(), loops(trim=False), "tilt")
    both = multiloop_transfer(rig_plant(), loops(), "tilt")
    assert alone.drift_modes == 1 and both.drift_modes == 0
    # with the trim loop open, the tilt loop's margins are those of the single loop on
    # the tilt output — computed through rigbench.tuning.loop from the transfer function
    # θ/u = −c·s/((τe·s + 1)(s² − a²)) (docs/METHODS.md §4) with the gyro derivative
    num = [-C_W, 0.0]
    den = np.polymul([TAU_E, 1.0], [1.0, 0.0, -A_POLE ** 2])
    single = margins(LoopController(TILT["kp"], TILT["ki"], TILT["kd"], TILT["tf"], h_s=H,
                                    direct_acting=True, rate_derivative=True),
                     PlantModel(num, den, H))
    m = multiloop_margins(rig_plant(), loops(trim=False), "tilt")
    assert m.stable and single.stable
    assert m.phase_margin_deg == pytest.approx(single.phase_margin_deg, rel=1e-9)
    assert m.gain_margin_lower == pytest.approx(single.gain_margin_lower, rel=1e-9)
    assert m.ms == pytest.approx(single.ms, rel=1e-9)


def test_decoupled_loops_do_not_see_each_other():
    # Two independent plants 1/(s+1)^3 and e^{−0.1s}/(2s+1) in one MIMO system: breaking
    # either loop gives exactly its single-loop margins (analytic: no coupling).
    a1 = np.array([[-3.0, -3.0, -1.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    a = np.zeros((4, 4))
    a[:3, :3], a[3, 3] = a1, -0.5
    b = np.zeros((4, 2))
    b[0, 0], b[3, 1] = 1.0, 0.5
    c = np.zeros((2, 4))
    c[0, 2], c[1, 3] = 1.0, 1.0
    plant = sample_ss(a, b, c, np.zeros((2, 2)), H, delays_s=[0.0, 0.1], inputs=("u1", "u2"),
                      outputs=("y1", "y2"))
    c1 = LoopController(2.0, 1.0, 0.5, 0.05, h_s=H)
    c2 = LoopController(1.5, 2.0, h_s=H)
    lps = [FeedbackLoop("one", c1, "y1", "u1"), FeedbackLoop("two", c2, "y2", "u2")]
    for name, ctrl, pm in (("one", c1, PlantModel([1.0], [1.0, 3.0, 3.0, 1.0])),
                           ("two", c2, PlantModel([1.0], [2.0, 1.0], 0.1))):
        m, s = multiloop_margins(plant, lps, name), margins(ctrl, pm)
        assert m.phase_margin_deg == pytest.approx(s.phase_margin_deg, rel=1e-9)
        assert m.gain_margin_upper == pytest.approx(s.gain_margin_upper, rel=1e-9)
        assert m.ms == pytest.approx(s.ms, rel=1e-9)


def test_bad_loop_sets_are_refused_with_the_loop_named():
    plant = rig_plant()
    good = loops()
    with pytest.raises(ValueError, match="'trim'.*not a plant output"):
        multiloop_margins(plant, [good[0], FeedbackLoop("trim", good[1].controller, "speed",
                                                        "tilt")], "tilt")
    with pytest.raises(ValueError, match="drive the same"):
        multiloop_margins(plant, good + [FeedbackLoop("x", good[1].controller, "wheel",
                                                      "tilt")], "tilt")
    with pytest.raises(ValueError, match="sample time"):
        multiloop_margins(plant, [FeedbackLoop("tilt", LoopController(1.0, h_s=0.001),
                                               "tilt", "cmd")], "tilt")
    with pytest.raises(ValueError, match="no loop named"):
        multiloop_margins(plant, good, "pitch")
    assert sample_tf([1.0], [1.0, 1.0], H).outputs == ("y",)
