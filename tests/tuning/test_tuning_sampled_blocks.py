"""The state-space pieces of the sampled-loop analysis against closed forms, python-control
in state space, and the simulated board itself."""

import math
import sys
from pathlib import Path

import control
import numpy as np
import pytest

from rigbench.rig.firmware.board import make_board
from rigbench.tuning.interconnect import close_loops
from rigbench.tuning.loop import (LoopController, PlantModel, loop_transfer, sampled_blocks,
                               simulate_disturbance, state_feedback_loop)
from rigbench.tuning.margins import margins
from rigbench.tuning.margins_sampled import _eig_stable, _nyquist, _range, _Split
from rigbench.tuning.crossings import grid
from rigbench.tuning.sampled import FrequencyEvaluator, board_pid, sample_tf
from rigbench.wire import messages as msg

from ss_reference import RefLoop, pid_loop, plant_ss, ref_margins, shift_register

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "rig"))
from sim_host import Host  # noqa: E402

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")


def lag(n, tau=1.0):
    return np.poly([-1.0 / tau] * n) * tau ** n


def zoh_series(step, h, z, terms=4000):
    """P(z) = Σ g[k] z^−k with g[k] = y(kh) − y((k−1)h), y the step response: the
    definition of the zero-order-hold equivalent (Åström & Wittenmark, Computer-Controlled
    Systems, §2.3), summed until g has died out."""
    k = np.arange(terms)
    g = step(k * h) - step((k - 1) * h)
    return np.array([np.sum(g * zz ** (-k.astype(float))) for zz in z])


def test_state_space_reference_is_well_conditioned_at_2khz_and_transfer_functions_are_not():
    # 1/((s+1)(2s+1)(5s+1)(20s+1)) at 2 kHz: the exact sampled poles are e^{p·h} (analytic).
    # python-control's c2d of the state-space model keeps 1 − z to 5e-10 relative here;
    # the transfer function in z (c2d of the tf, poles = roots of its denominator) misses
    # it by 4% to 230%.
    h = 0.0005
    poles_s = np.array([-1.0, -0.5, -0.2, -0.05])
    den = np.poly(poles_s)
    exact = np.sort(np.exp(poles_s * h))
    ss_poles = np.sort(np.linalg.eigvals(control.c2d(control.ss(control.tf([1.0], den)), h).A).real)
    tf_poles = np.sort(np.roots(control.c2d(control.tf([1.0], den), h).den[0][0]).real)
    err_ss = np.max(np.abs((1 - ss_poles) / (1 - exact) - 1))
    err_tf = np.max(np.abs((1 - tf_poles) / (1 - exact) - 1))
    assert err_ss < 1e-8
    assert err_tf > 0.01          # the ill-conditioning the state-space path avoids
    # rigbench's own sampled plant agrees with the analytic poles as well
    p = sample_tf([1.0], den, h)
    mine = np.sort(np.linalg.eigvals(p.a).real)
    assert np.max(np.abs((1 - mine) / (1 - exact) - 1)) < 1e-8


@pytest.mark.parametrize("dead_over_h", [0.0, 0.25, 0.5, 2.3, 250.0])
def test_zoh_with_fractional_dead_time_matches_the_definition(dead_over_h):
    # e^{−τs}/(s+1) at 500 Hz: step response 1 − e^{−(t−τ)} for t >= τ (analytic)
    h = 0.002
    tau = dead_over_h * h
    p = sample_tf([1.0], [1.0, 1.0], h, delay_s=tau)
    w = np.array([0.01, 1.0, 100.0, 1500.0])
    z = np.exp(1j * w * h)
    mine = FrequencyEvaluator(p.a, p.b, p.c, p.d)(z) * z ** (-p.input_delays[0])
    exact = zoh_series(lambda t: np.where(t >= tau, 1 - np.exp(-(t - tau)), 0.0), h, z,
                       terms=40000)
    assert np.allclose(mine, exact, rtol=1e-9, atol=1e-12)
    # and with python-control (sub-sampled at h/N and lifted, whole samples as registers)
    ref, m = plant_ss([1.0], [1.0, 1.0], h, tau)
    assert m == p.input_delays[0]
    assert np.allclose(np.asarray(ref(z)).reshape(-1) * z ** (-m), exact, rtol=1e-9)


def test_zoh_of_a_fast_fourth_order_lag_is_exact():
    # 1/(τs+1)^4 with τ = 1 ms at 2 kHz: a realisation from polynomials in s with
    # coefficients from 1 to 1e12; step response 1 − e^{−x}(1 + x + x²/2 + x³/6), x = t/τ.
    tau, h = 0.001, 0.0005
    p = sample_tf([1.0], lag(4, tau), h)
    z = np.exp(1j * np.array([10.0, 870.0, 6000.0]) * h)

    def step(t):
        x = np.maximum(t, 0) / tau
        return np.where(t > 0, 1 - np.exp(-x) * (1 + x + x * x / 2 + x ** 3 / 6), 0.0)

    assert np.allclose(FrequencyEvaluator(p.a, p.b, p.c, p.d)(z), zoh_series(step, h, z),
                       rtol=1e-10)


def test_board_pid_is_the_firmware_difference_equation():
    # u = σ(kp·e + I + kd·v) step by step (bench/rigbench/rig/firmware/control.py), driven by a
    # random measurement and set-point, against the state-space system.
    from rigbench.rig.firmware.control import Pid

    h, kp, ki, kd, tf = 0.002, 1.3, 4.0, 0.07, 0.01
    rng = np.random.default_rng(3)
    y, r = rng.normal(size=300), rng.normal(size=300)
    for direct in (False, True):
        fw = Pid(direct=not direct, dt_s=h)        # the firmware's flag: e = sp − y
        sysd = board_pid(kp, ki, kd, tf, h, direct_acting=direct)
        x = np.zeros(sysd.n_states)
        fw.update(0.0, 0.0, kp, ki, kd, tf, 1e9)   # first call: no previous sample
        for k in range(len(y)):
            want = fw.update(r[k], y[k], kp, ki, kd, tf, 1e9)
            inp = np.array([y[k], r[k]])
            got = float(sysd.c[0] @ x + sysd.d[0] @ inp)
            x = sysd.a @ x + sysd.b @ inp
            assert got == pytest.approx(want, rel=1e-12, abs=1e-12)


def test_board_applies_the_command_in_the_period_that_computes_it():
    # The simulated board (rigbench.rig.firmware.board.SimBoard) on 1/(s+1)^3 at 500 Hz with a
    # load pulse injected at its output: its logged response equals the loop with no
    # sample of computational delay, and differs from one with a sample.
    kp, ki, kd, tf = 2.0, 1.5, 0.4, 0.01
    board = make_board("plant", num=(1.0,), den=(1.0, 3.0, 3.0, 1.0), noise=0.0)
    host = Host(board)
    host.ask(msg.Set, (("main_kp", kp), ("main_ki", ki), ("main_kd", kd),
                       ("main_dfilt_s", tf)))
    host.start("hold")
    host.ask(msg.Stream, 500.0)
    host.run(0.2)
    host.ask(msg.Mode, "inject", (("loop", "main"), ("at", "output"), ("amp", "0.5"),
                                  ("time_s", "0.2")))
    got = host.run(4.0)
    y, u = host.column(got, "y"), host.column(got, "u")
    k0 = int(np.flatnonzero(np.abs(u) > 0.25)[0])
    plant = PlantModel([1.0], [1.0, 3.0, 3.0, 1.0])
    n = len(y) - k0
    for delay, agree in ((0, True), (1, False)):
        sim = simulate_disturbance(LoopController(kp, ki, kd, tf, h_s=0.002, delay_samples=delay),
                                   plant, t_end_s=(n - 1) * 0.002, kind="pulse", amplitude=0.5,
                                   width_s=0.2, at="input")
        # telemetry carries 6 significant digits (PROTOCOL.md §6.1)
        close = np.allclose(y[k0:], sim.y, rtol=1e-5, atol=1e-6)
        assert close == agree


def test_rate_derivative_matches_python_control():
    # The derivative read from a rate sensor (a gyro) instead of the sample difference,
    # on e^{−0.01s}/(s+1)^3 at 500 Hz; reference: python-control with the plant's second
    # output C·A·x.
    h = 0.002
    kp, ki, kd, tf = 2.0, 1.0, 0.8, 0.01
    ctrl = LoopController(kp, ki, kd, tf, h_s=h, rate_derivative=True)
    plant = PlantModel([1.0], lag(3), 0.01)
    ref = ref_margins(pid_loop([1.0], lag(3), 0.01, kp, ki, kd, tf, h, rate=True))
    m = margins(ctrl, plant)
    assert m.stable == ref.stable
    assert m.phase_margin_deg == pytest.approx(ref.pm_deg, rel=1e-4)
    assert m.gain_margin_upper == pytest.approx(ref.gm_upper, rel=1e-4)
    assert m.ms == pytest.approx(ref.ms, rel=1e-4)
    # the sample difference lags the true rate by about h/2: a different loop (its gain
    # margin is 4% higher)
    assert margins(LoopController(kp, ki, kd, tf, h_s=h), plant).gain_margin_upper != \
        pytest.approx(m.gain_margin_upper, rel=0.01)


A, C = 8.8, 0.0625   # speed-drive balance loop, docs/METHODS.md §6 demo rig [calc]


def test_wheel_drift_mode_is_taken_out_and_counted():
    # Tilt PID on the speed-drive plant −c·s/((τe s + 1)(s² − a²)) at 500 Hz: the
    # integral through the plant zero at s = 0 is a closed-loop pole at z = 1 that no
    # tilt gain moves. python-control's closed loop has exactly one eigenvalue there and
    # all others inside the unit circle; the loop is reported stable with one drift mode,
    # and its lower gain margin agrees with the reference's (docs/METHODS.md §4: the
    # continuous loop's is a²/(c·ki)).
    h, kp, ki, kd = 0.002, 60.0, 3000.0, 1.0
    num, den = [-C, 0.0], np.polymul([0.008, 1.0], [1.0, 0.0, -A * A])
    ctrl = LoopController(kp, ki, kd, h_s=h, direct_acting=True)
    lt = loop_transfer(ctrl, PlantModel(num, den))
    assert lt.drift_modes == 1
    ref = pid_loop(num, den, 0.0, kp, ki, kd, 0.0, h, direct=True)
    poles = ref.closed_loop_poles()
    at_one = np.abs(poles - 1) < 1e-8
    assert at_one.sum() == 1 and np.all(np.abs(poles[~at_one]) < 1)
    m = margins(ctrl, PlantModel(num, den))
    assert m.stable and m.drift_modes == 1 and "z = 1" in m.notes
    rm = ref_margins(ref, lo=1e-10 * math.pi / h)    # L(ω → 0) is real there
    assert m.gain_margin_lower == pytest.approx(rm.gm_lower, rel=1e-4)
    assert m.gain_margin_lower == pytest.approx(A * A / (C * ki), rel=0.01)
    assert m.gain_margin_upper == pytest.approx(rm.gm_upper, rel=1e-4)
    assert m.phase_margin_deg == pytest.approx(rm.pm_deg, rel=1e-4)


def _long_dead_loop(tau_s=8.0, rate_hz=500.0, gain=1.0):
    """e^{−3s}/(τs+1)² with the Ziegler–Nichols PID of e^{−3s}/(8s+1)² (1500 samples)."""
    ku, tu = 6.0161, 22.4433   # ultimate point of e^{−3s}/(8s+1)² [calc], checked below
    k, ti, td = 0.6 * ku * gain, tu / 2, tu / 8
    ctrl = LoopController(k, k / ti, k * td, td / 10, h_s=1.0 / rate_hz)
    return ctrl, PlantModel([1.0], lag(2, tau_s), 3.0)


def test_long_dead_time_verdict_does_not_flip_when_a_time_constant_moves():
    # The ultimate point: 2·atan(8ω) + 3ω = π (analytic phase), Ku = 1 + 64ω².
    from scipy.optimize import brentq
    wu = brentq(lambda w: 2 * math.atan(8 * w) + 3 * w - math.pi, 0.01, 1.0)
    assert 1 + 64 * wu * wu == pytest.approx(6.0161, abs=1e-4)
    assert 2 * math.pi / wu == pytest.approx(22.4433, abs=1e-4)
    base = margins(*_long_dead_loop())
    assert base.method.startswith("Nyquist") and base.stable
    for d in (-5e-5, 5e-5):
        m = margins(*_long_dead_loop(8.0 + d))
        assert m.stable and m.method == base.method
        assert m.phase_margin_deg == pytest.approx(base.phase_margin_deg, abs=0.01)
        assert m.gain_margin_upper == pytest.approx(base.gain_margin_upper, rel=1e-3)
    # (the loop at τ = 8 s is checked against python-control's closed-loop eigenvalues in
    # test_tuning_margins_sampled, case dead3-lag8x2-500.0-ZN)


@pytest.mark.parametrize("factor", [0.98, 1.02])
def test_nyquist_count_and_eigenvalues_agree_at_the_gain_margin(factor):
    # 1/(s+1)^2 e^{−0.5s} at 500 Hz (250 samples, decided by the Nyquist count) with the
    # gains 2% inside and outside the gain margin: the count, the eigenvalues of the
    # closed-loop matrix and python-control's closed loop agree.
    h = 0.002
    plant = PlantModel([1.0], lag(2), 0.5)
    base = LoopController(0.5, 0.4, 0.1, tf_s=0.01, h_s=h)
    g = margins(base, plant).gain_margin_upper * factor
    ctrl = LoopController(g * 0.5, g * 0.4, g * 0.1, tf_s=0.01, h_s=h)
    lt = loop_transfer(ctrl, plant)
    sp = _Split(lt)
    w = grid(sp, *_range(lt, sp))[0]
    count = _nyquist(lt, sp, w)
    ref = pid_loop(plant.num, plant.den, 0.5, ctrl.kp, ctrl.ki, ctrl.kd, 0.01, h).stable()
    assert (count == 0) == _eig_stable(lt) == ref == (factor < 1)
    assert margins(ctrl, plant).stable == ref


def test_state_feedback_loop_matches_python_control():
    # A sampled double integrator with one sample of command delay, x = (position,
    # velocity, u[k−1]), under u = −K·x; the loop broken at the plant input is
    # L = K(zI − A)^{-1}B (python-control state space, evaluated per frequency).
    from rigbench.tuning.margins import loop_margins

    h = 0.002
    a = np.array([[1.0, h, h * h / 2], [0.0, 1.0, h], [0.0, 0.0, 0.0]])
    b = np.array([0.0, 0.0, 1.0])
    k = np.array([400.0, 40.0, 0.3])
    lt = state_feedback_loop(a, b, k, h)
    assert np.allclose(np.sort_complex(np.linalg.eigvals(lt.closed_loop_matrix())),
                       np.sort_complex(np.linalg.eigvals(a - np.outer(b, k))), atol=1e-12)
    ref = RefLoop(control.ss(a, b.reshape(-1, 1), k.reshape(1, -1), [[0.0]], h), 0, h)
    m, rm = loop_margins(lt), ref_margins(ref)
    assert m.stable == rm.stable
    assert m.phase_margin_deg == pytest.approx(rm.pm_deg, rel=1e-4)
    assert m.gain_margin_upper == pytest.approx(rm.gm_upper, rel=1e-4)
    assert m.ms == pytest.approx(rm.ms, rel=1e-4)


def test_missing_margins_say_why():
    h = 0.002
    # P control of a stable first-order lag: |L| < 1 everywhere and never −180°
    m = margins(LoopController(0.5, h_s=h), PlantModel([1.0], [1.0, 1.0]))
    assert m.stable and m.phase_margin_deg is None and m.gain_margin_upper is not None
    assert m.reason("phase_margin_deg") == "no gain crossover"
    assert m.reason("gain_margin_lower") == "no phase crossover below 1"
    # an unstable closed loop gets no margins at all
    u = margins(LoopController(50.0, 50.0, h_s=h), PlantModel([1.0], lag(3)))
    assert not u.stable
    assert all(getattr(u, f) is None for f in ("gain_margin_upper", "gain_margin_lower",
                                               "phase_margin_deg", "delay_margin_s"))
    assert set(u.reasons.values()) == {"closed loop unstable"}


def test_close_loops_refuses_bad_wiring():
    h = 0.002
    p, c = sampled_blocks(LoopController(1.0, 1.0, h_s=h), PlantModel([1.0], [1.0, 1.0]))
    with pytest.raises(ValueError, match="not the output of any block"):
        close_loops([p, c], "nowhere")
    with pytest.raises(ValueError, match="different times"):
        close_loops([p, board_pid(1.0, 0.0, 0.0, 0.0, 0.001, output="u")], "u")
    # two P controllers setting each other's set-points with kp·kp = 1: no solution
    a = board_pid(2.0, 0.0, 0.0, 0.0, h, measure="y", setpoint="rb", output="ra")
    b = board_pid(0.5, 0.0, 0.0, 0.0, h, measure="y", setpoint="ra", output="rb")
    with pytest.raises(ValueError, match="algebraic loop"):
        close_loops([p, c, a, b], "u")
    assert shift_register(0, h).nstates == 0


def test_nyquist_count_on_an_open_loop_unstable_plant():
    # The speed-drive balance loop with 6 ms of dead time at 500 Hz: one open-loop pole
    # outside the unit circle (P = 1), a lower and an upper gain margin. Gains 2% either
    # side of each: the state-space Nyquist count, python-control's closed-loop
    # eigenvalues (its one eigenvalue at z = 1, the wheel-speed drift, set aside) and the
    # expected verdict agree.
    h = 0.002
    num, den = [-C, 0.0], np.polymul([0.008, 1.0], [1.0, 0.0, -A * A])
    plant = PlantModel(num, den, 0.006)
    base = margins(LoopController(40.0, 2500.0, 0.5, 0.004, h_s=h, direct_acting=True), plant)
    assert base.stable and base.gain_margin_lower and base.gain_margin_upper
    for edge, inside in ((base.gain_margin_lower, 1.02), (base.gain_margin_upper, 0.98)):
        for factor, stable in ((inside, True), (1 / inside, False)):
            g = edge * factor
            ctrl = LoopController(40.0 * g, 2500.0 * g, 0.5 * g, 0.004, h_s=h, direct_acting=True)
            lt = loop_transfer(ctrl, plant)
            assert np.sum(np.abs(lt.open_loop_poles()) > 1) == 1
            sp = _Split(lt)
            count = _nyquist(lt, sp, grid(sp, *_range(lt, sp))[0])
            ref = pid_loop(num, den, 0.006, ctrl.kp, ctrl.ki, ctrl.kd, 0.004, h, direct=True)
            ref_poles = ref.closed_loop_poles()
            ref_stable = bool(np.all(np.abs(ref_poles[np.abs(ref_poles - 1) > 1e-8]) < 1))
            assert (count == 0) == ref_stable == stable == margins(ctrl, plant).stable
