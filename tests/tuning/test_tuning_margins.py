"""Margins and closed-loop simulation against python-control and analytic results."""

import math

import control
import numpy as np
import pytest

from rigbench.tuning.loop import LoopController, PlantModel, loop_transfer, simulate_disturbance
from rigbench.tuning.sampled import sample_tf
from rigbench.tuning.margins import margins

LAG3 = PlantModel([1.0], [1.0, 3.0, 3.0, 1.0])
G3 = control.tf([1.0], [1.0, 3.0, 3.0, 1.0])


def pid_tf(kp, ki, kd, tf=0.0):
    c = control.tf([kp], [1.0])
    if ki:
        c = c + control.tf([ki], [1.0, 0.0])
    if kd:
        c = c + control.tf([kd, 0.0], [tf, 1.0] if tf else [1.0])
    return c


def pid_z(kp, ki, kd, tf, h):
    """The discrete PID stated in rigbench.tuning.loop, built in python-control."""
    c = control.tf([kp], [1.0], h)
    if ki:
        c = c + control.tf([ki * h, 0.0], [1.0, -1.0], h)
    if kd:
        c = c + control.tf([kd, -kd], [tf + h, -tf], h)
    return c


pytestmark = pytest.mark.filterwarnings("ignore:stability_margins:UserWarning")


def check_against_control(m, sys, rel=1e-6):
    # python-control stability_margins: gm, pm, sm, wpc, wgc, wms (python-control docs)
    gm, pm, sm, wpc, wgc, _ = control.stability_margins(sys)
    assert m.stable
    if math.isinf(gm):
        assert m.gain_margin_upper is None
    else:
        assert m.gain_margin_upper == pytest.approx(gm, rel=rel)
        assert m.gain_margin_upper_db == pytest.approx(20 * math.log10(gm), rel=rel)
        assert m.phase_crossover_rad_s == pytest.approx(wpc, rel=rel)
    assert m.phase_margin_deg == pytest.approx(pm, rel=rel)
    assert m.crossover_rad_s == pytest.approx(wgc, rel=rel)
    assert m.ms == pytest.approx(1 / sm, rel=max(rel, 2e-3))
    assert m.gain_margin_lower is None


@pytest.mark.parametrize("kp, ki, kd, tf", [
    (4.8, 4.8 / 1.8138, 4.8 * 0.4534, 0.0),   # Z-N PID on 1/(s+1)^3 (docs/METHODS.md §3 row)
    (2.0, 0.0, 0.0, 0.0),
    (1.0, 0.5, 0.0, 0.0),
    (4.8, 2.6, 2.2, 0.1),
])
def test_continuous_margins_match_python_control(kp, ki, kd, tf):
    m = margins(LoopController(kp, ki, kd, tf), LAG3)
    check_against_control(m, pid_tf(kp, ki, kd, tf) * G3)
    assert m.method == "closed-loop poles"


def test_p_control_of_lag3_gain_margin_is_exact():
    # 1/(s+1)^3 with kp: ultimate gain 8 at ω = √3 (docs/METHODS.md §3), so GM = 8/kp.
    m = margins(LoopController(2.0), LAG3)
    assert m.gain_margin_upper == pytest.approx(4.0, rel=1e-9)
    assert m.phase_crossover_rad_s == pytest.approx(math.sqrt(3), rel=1e-9)


@pytest.mark.parametrize("delay_samples", [0, 2])
def test_discrete_margins_match_python_control(delay_samples):
    kp, ki, kd, tf, h = 4.8, 2.6, 2.2, 0.1, 0.05
    m = margins(LoopController(kp, ki, kd, tf, h_s=h, delay_samples=delay_samples), LAG3)
    gd = control.sample_system(G3, h, "zoh")
    comp = control.tf([1.0], [1.0] + [0.0] * delay_samples, h)
    check_against_control(m, pid_z(kp, ki, kd, tf, h) * gd * comp)


def test_discrete_with_whole_sample_dead_time_matches_python_control():
    h = 0.05
    plant = PlantModel([1.0], [1.0, 1.0], 1.0)
    m = margins(LoopController(1.3571, 1.3571 / 1.5485, h_s=h), plant)
    gd = control.sample_system(control.tf([1.0], [1.0, 1.0]), h, "zoh")
    gd = gd * control.tf([1.0], [1.0] + [0.0] * 20, h)
    check_against_control(m, pid_z(1.3571, 1.3571 / 1.5485, 0, 0, h) * gd, rel=1e-5)


def test_fractional_dead_time_discretisation_is_exact():
    # Step response of e^{-τs}/(s+1) sampled at h with τ = 2.4h: y(t_k) = 1 − e^{−(t_k − τ)}
    # for t_k >= τ (analytic).
    h, tau = 0.1, 0.24
    p = sample_tf([1.0], [1.0, 1.0], h, delay_s=tau)
    assert p.input_delays == (2,)
    x = np.zeros(p.n_states)
    ys = []
    for k in range(30):
        u = 1.0 if k - 2 >= 0 else 0.0          # the input after the whole-sample delay
        ys.append(float(p.c[0] @ x + p.d[0, 0] * u))
        x = p.a @ x + p.b[:, 0] * u
    t = np.arange(30) * h
    expect = np.where(t >= tau, 1 - np.exp(-(t - tau)), 0.0)
    assert np.allclose(ys, expect, atol=1e-12)


def test_continuous_dead_time_matches_pade_reference():
    # e^{-s}/(s+1) with the Z-N PI of docs/METHODS.md §3 (K 1.3571·0.45/0.6, Ti) — compared with
    # python-control on a 12th-order Padé approximation of the delay.
    kp, ki = 1.0178, 1.0178 / 2.5809
    m = margins(LoopController(kp, ki), PlantModel([1.0], [1.0, 1.0], 1.0))
    pade = control.tf(*control.pade(1.0, 12))
    gm, pm, sm, wpc, wgc, _ = control.stability_margins(
        pid_tf(kp, ki, 0) * control.tf([1.0], [1.0, 1.0]) * pade)
    assert m.stable and m.method.startswith("Nyquist")
    assert m.gain_margin_upper == pytest.approx(gm, rel=1e-4)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-4)
    assert m.ms == pytest.approx(1 / sm, rel=1e-3)


def test_delay_margin_of_integrator_loop():
    # L = K e^{-τs}/s: crossover ω = K, phase margin 90° − Kτ·180/π, delay margin π/(2K) − τ
    # (analytic).
    k, tau = 2.0, 0.1
    m = margins(LoopController(0.0, k), PlantModel([1.0], [1.0], tau))
    assert m.crossover_rad_s == pytest.approx(k, rel=1e-9)
    assert m.phase_margin_deg == pytest.approx(90 - math.degrees(k * tau), rel=1e-9)
    assert m.delay_margin_s == pytest.approx(math.pi / (2 * k) - tau, rel=1e-9)
    # the integrator loop goes unstable at gain factor π/(2Kτ) (arg = −π at ω = π/(2τ))
    assert m.gain_margin_upper == pytest.approx(math.pi / (2 * k * tau), rel=1e-6)


A, C = 8.8, 0.0625  # speed-drive balance loop, docs/METHODS.md §6 demo rig [calc]


def balance_plant(tau_e=0.0, delay=0.0):
    den = np.polymul([tau_e, 1.0], [1.0, 0.0, -A * A]) if tau_e else [1.0, 0.0, -A * A]
    return PlantModel([-C, 0.0], den, delay)


@pytest.mark.parametrize("ki", [800.0, 1239.1, 1300.0, 3000.0])
def test_balance_loop_needs_ki_above_a2_over_c(ki):
    # Closed loop (1 + c·kd)s² + c·kp·s + (c·ki − a²) (docs/METHODS.md §4): stable iff
    # ki > a²/c = 1239.04 (kp, kd > 0); the lower gain margin is a²/(c·ki), no upper one.
    m = margins(LoopController(60.0, ki, 1.0, direct_acting=True), balance_plant())
    assert m.stable == (ki > A * A / C)
    if m.stable:
        assert m.gain_margin_lower == pytest.approx(A * A / (C * ki), rel=1e-9)
        assert m.gain_margin_upper is None


def test_p_alone_never_stabilises_balance_loop():
    for kp in (1.0, 100.0, 1e4):
        assert not margins(LoopController(kp, 0.0, 0.0, direct_acting=True),
                           balance_plant()).stable


def test_balance_loop_with_lag_lower_margin_from_routh():
    # With the driver lag τe the closed loop is τe s³ + (1 + c k kd)s² + (c k kp − τe a²)s
    # + (c k ki − a²); Routh: stable iff all coefficients > 0 and a2·a1 > a3·a0, i.e.
    # c²kd·kp·k² + (c·kp − τe·a²·c·kd − τe·c·ki)·k > 0 (analytic). With these gains the
    # Routh condition (an oscillatory loss), not c·k·ki > a², sets the lower margin, and
    # nothing limits the gain from above.
    tau_e, kp, ki, kd = 0.008, 20.0, 3000.0, 20.0
    m = margins(LoopController(kp, ki, kd, direct_acting=True), balance_plant(tau_e))
    k_routh = -(C * kp - tau_e * A * A * C * kd - tau_e * C * ki) / (C * C * kd * kp)
    assert A * A / (C * ki) < k_routh < 1
    assert m.stable
    assert m.gain_margin_lower == pytest.approx(k_routh, rel=1e-6)
    assert m.gain_margin_upper is None


@pytest.mark.parametrize("factor", [0.3, 0.6, 3.0, 60.0, 100.0])
def test_dead_time_stability_agrees_with_pade_poles(factor):
    # Nyquist count on the balance loop with 6 ms dead time vs closed-loop poles of a
    # 10th-order Padé approximation built with python-control.
    kp, ki, kd, delay = 40.0, 2500.0, 0.5, 0.006
    plant = balance_plant(0.008, delay)
    m = margins(LoopController(factor * kp, factor * ki, factor * kd, direct_acting=True),
                plant)
    p = control.tf(list(plant.num), list(plant.den)) * control.tf(*control.pade(delay, 10))
    loop = -pid_tf(factor * kp, factor * ki, factor * kd) * p
    poles = control.poles(control.feedback(control.minreal(loop, verbose=False), 1))
    assert m.stable == bool(np.all(poles.real < 0))
    assert m.stable == (0.5 < factor < 80)  # lower margin a²/(c·ki) ≈ 0.496, upper ≈ 80.8


def test_simulate_disturbance_matches_python_control_discrete():
    kp, ki, kd, tf, h = 4.8, 2.6, 2.2, 0.1, 0.05
    ctrl = LoopController(kp, ki, kd, tf, h_s=h, delay_samples=1)
    r = simulate_disturbance(ctrl, LAG3, t_end_s=20.0, kind="step", amplitude=0.5, at="input")
    gd = control.sample_system(G3, h, "zoh")
    cd = pid_z(kp, ki, kd, tf, h) * control.tf([1.0], [1.0, 0.0], h)
    ref = control.forced_response(control.feedback(gd, cd), r.t_s, r.disturbance)
    assert np.allclose(r.y, ref.outputs, atol=1e-9)
    # u is the command as the board computes it, −C·y (reverse acting, set-point 0); the
    # sample of delay lies between it and the plant
    ref_u = control.forced_response(-pid_z(kp, ki, kd, tf, h), r.t_s, r.y)
    assert np.allclose(r.u, ref_u.outputs, atol=1e-9)


def test_simulate_pulse_on_balance_loop_returns_to_zero():
    ctrl = LoopController(150.0, 3000.0, 2.0, h_s=0.002, delay_samples=1, direct_acting=True)
    r = simulate_disturbance(ctrl, balance_plant(0.008), t_end_s=3.0, kind="pulse",
                             amplitude=5.0, width_s=0.05, start_s=0.1, at="input")
    assert margins(ctrl, balance_plant(0.008)).stable
    assert np.max(np.abs(r.y)) > 1e-3 and abs(r.y[-1]) < 1e-3 * np.max(np.abs(r.y))
    assert r.disturbance[(r.t_s > 0.11) & (r.t_s < 0.14)].min() == 5.0
    assert r.disturbance[r.t_s > 0.16].max() == 0.0


def test_loop_transfer_cancels_wheel_drift_mode():
    # PI on the speed-drive tilt plant: the integrator cancels the plant's zero at s = 0
    # (the wheel-speed drift mode), leaving docs/METHODS.md §4's polynomial.
    lt = loop_transfer(LoopController(60.0, 2000.0, 1.0, direct_acting=True), balance_plant())
    char = np.polyadd(lt.den, lt.num)
    assert char / char[0] == pytest.approx(np.array([1 + C * 1.0, C * 60.0, C * 2000.0 - A * A])
                                           / (1 + C * 1.0))
