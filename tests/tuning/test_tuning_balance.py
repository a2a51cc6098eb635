"""Balance model fitting and designs: simulated data with a known model, analytic pole
placement, LQR against python-control's dlqr."""

import math
import sys
from pathlib import Path

import control
import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from balance_sim import prbs, simulate_balance  # noqa: E402

from rigbench.tuning.balance import (BalanceModel, design_lqr, design_pole_placement,  # noqa: E402
                                  fit_balance_model)
from rigbench.tuning.balance_design import lqr_matrices  # noqa: E402
from rigbench.tuning.loop import LoopController  # noqa: E402
from rigbench.tuning.margins import margins  # noqa: E402
from rigbench.base.units import gain_from_si, gain_to_si  # noqa: E402

DEG, REV = math.pi / 180, 2 * math.pi
# Invented demo rig of docs/METHODS.md §6 (demo numbers): Jp 0.012, Jw 8e-4, mgl ≈ 1.0 N·m/rad
JP, JW, MGL = 0.0120, 8.0e-4, 1.0
A_SPEED = math.sqrt(MGL / (JP + JW))
C_SPEED = JW / (JP + JW)
A_TORQUE = math.sqrt(MGL / JP)
DT = 0.002
TRUE_SPEED = BalanceModel(a=A_SPEED, c_prime=C_SPEED, offset_rad=0.8 * DEG, tau_e_s=0.008,
                          delay_samples=1, dt_s=DT)
TRUE_TORQUE = BalanceModel(a=A_TORQUE, c_prime=1 / JP, offset_rad=0.8 * DEG, tau_e_s=None,
                           delay_samples=1, dt_s=DT, drive="torque")
NOISE = dict(tilt_noise=0.03 * DEG, gyro_noise=0.2 * DEG, wheel_noise=0.05 * REV)


def test_demo_rig_derived_figures():
    # docs/METHODS.md §6 [calc]: unstable pole ≈ 9.1 rad/s (torque drive), 8.8 rad/s (speed
    # drive); minimum stabilising ki = a²/c ≈ 3.5 (rev/s)/(deg·s).
    assert A_TORQUE == pytest.approx(9.1, abs=0.05)
    assert A_SPEED == pytest.approx(8.8, abs=0.05)
    ki_min = gain_from_si(A_SPEED ** 2 / C_SPEED, "rev/s", "deg", "1/s")
    assert ki_min == pytest.approx(3.5, abs=0.05)


def speed_run(seed=0):
    # the stabilising start of docs/METHODS.md §6: kp 0.64, ki 9.9 (rev/s per deg, per deg·s),
    # kd small, wheel-speed trim (sign for this model's conventions: see the trim check)
    kp = gain_to_si(0.64, "rev/s", "deg")
    ki = gain_to_si(9.9, "rev/s", "deg", "1/s")
    kd = gain_to_si(0.01, "rev/s", "deg/s", "s") * 0 + gain_to_si(0.01, "rev/s", "deg")
    return simulate_balance(a=A_SPEED, c=C_SPEED, delta=0.8 * DEG, kp=kp, ki=ki, kd=kd,
                            trim_p=-0.2 * DEG / REV, trim_i=-0.05 * DEG / REV, t_end=16.0,
                            excitation=prbs(1.0 * DEG), seed=seed, **NOISE)


def test_fit_speed_drive_from_noisy_closed_loop_data():
    r = speed_run()
    assert np.max(np.abs(r.true_tilt)) < 10 * DEG      # it balanced
    fit = fit_balance_model(r.t, r.tilt, r.gyro, r.wheel, r.command, dt=DT)
    # brief: fitted a within 2% of the true a (docs/METHODS.md §4 saw 1.5% [calc])
    assert fit.a == pytest.approx(A_SPEED, rel=0.02)
    assert fit.c_prime == pytest.approx(C_SPEED, rel=0.05)
    assert fit.offset_rad == pytest.approx(0.8 * DEG, abs=0.05 * DEG)
    assert fit.tau_e_s == pytest.approx(0.008, rel=0.1)
    assert fit.delay_samples == 1
    assert fit.drive_gain == pytest.approx(1.0, rel=0.02)
    # the stated 1-sigma uncertainties cover the errors
    assert 0 < fit.a_sigma and abs(fit.a - A_SPEED) < 5 * fit.a_sigma
    assert abs(fit.offset_rad - 0.8 * DEG) < 5 * fit.offset_sigma_rad


def test_fit_torque_drive():
    pp = design_pole_placement(TRUE_TORQUE, kind="PID", wn=12.0)
    r = simulate_balance(a=A_TORQUE, c=1 / JP, delta=0.8 * DEG, kp=pp.kp, ki=pp.ki, kd=pp.kd,
                         drive="torque", t_end=12.0, excitation=prbs(1.0 * DEG), seed=2,
                         tilt_noise=NOISE["tilt_noise"], gyro_noise=NOISE["gyro_noise"])
    fit = fit_balance_model(r.t, r.tilt, r.gyro, r.wheel, r.command, dt=DT, drive="torque")
    assert fit.a == pytest.approx(A_TORQUE, rel=0.02)
    assert fit.c_prime == pytest.approx(1 / JP, rel=0.05)
    assert fit.offset_rad == pytest.approx(0.8 * DEG, abs=0.05 * DEG)
    assert fit.delay_samples == 1 and fit.tau_e_s is None


def test_fit_refuses_stable_data():
    # A hanging pendulum θ̈ = −9θ − c·ẇ (stable, no unstable pole): the fit must refuse.
    from scipy import signal
    t = np.arange(0, 8, DT)
    rng = np.random.default_rng(0)
    b, a = signal.butter(2, 5 * 2 * DT)
    u = signal.lfilter(b, a, rng.standard_normal(len(t))) * 20
    _, w, _ = signal.lsim(([1.0], [0.008, 1.0]), u, t)
    _, tilt, _ = signal.lsim(([-C_SPEED, 0.0], [1.0, 0.0, 9.0]), w, t)
    with pytest.raises(ValueError, match="unstable pole"):
        fit_balance_model(t, tilt, np.gradient(tilt, DT), w, u, dt=DT)


def closed_loop_char(model, kp, ki, kd):
    """Analytic closed-loop polynomial (docs/METHODS.md §4), no delay."""
    a2 = model.a ** 2
    if model.drive == "speed":
        c = model.c_prime * model.drive_gain
        return np.polyadd(np.polymul([model.tau_e_s, 1], [1, 0, -a2]), c * np.array([kd, kp, ki]))
    return np.polyadd([1, 0, -a2, 0], model.c_prime * np.array([kd, kp, ki]))


@pytest.mark.parametrize("model, kind", [(TRUE_SPEED, "PI"), (TRUE_SPEED, "PID"),
                                         (TRUE_TORQUE, "PID")])
def test_pole_placement_lands_where_placed(model, kind):
    p = design_pole_placement(model, kind=kind, zeta=0.7, wn=15.0)
    assert p.applies
    target = np.array(p.details["target_poles"])
    # computed back through the loop code ...
    assert np.allclose(np.sort_complex(np.array(p.details["closed_loop_poles"])), target,
                       rtol=1e-8)
    # ... and from the analytic polynomial (docs/METHODS.md §4 [calc])
    char = closed_loop_char(model, p.kp, p.ki, p.kd)
    assert np.allclose(np.sort_complex(np.roots(char)), target, rtol=1e-8)
    assert abs(target[1]) == pytest.approx(15.0) or abs(target[0]) == pytest.approx(15.0)
    assert p.margins.stable


def test_pole_placement_pi_matches_methods_formula():
    # docs/METHODS.md §4: p3 = 1/τe − 2ζωn, kp = τe(ωn² + 2ζωn p3 + a²)/c′,
    # ki = (a² + τe ωn² p3)/c′
    zeta, wn, tau, a2, c = 0.7, 20.0, 0.008, A_SPEED ** 2, C_SPEED
    p3 = 1 / tau - 2 * zeta * wn
    p = design_pole_placement(TRUE_SPEED, zeta=zeta, wn=wn)
    assert p.kp == pytest.approx(tau * (wn ** 2 + 2 * zeta * wn * p3 + a2) / c)
    assert p.ki == pytest.approx((a2 + tau * wn ** 2 * p3) / c)
    assert p.kd == 0.0
    assert p.ki > a2 / c  # the integral supplies the stiffness (docs/METHODS.md §4)


def test_torque_drive_pi_not_applicable():
    p = design_pole_placement(TRUE_TORQUE, kind="PI")
    assert not p.applies and "PI" in p.reason


@pytest.mark.parametrize("model", [TRUE_SPEED, TRUE_TORQUE])
def test_lqr_gain_matches_python_control_dlqr(model):
    d = design_lqr(model)
    a_d, b_d, names = lqr_matrices(model)
    assert names == d.states and len(names) == (4 if model.drive == "speed" else 2) + 1
    k_ref, _, _ = control.dlqr(a_d, b_d, d.q, d.r)  # python-control dlqr
    assert np.allclose(d.k, np.ravel(k_ref), rtol=1e-6, atol=1e-9)
    assert np.all(np.abs(d.closed_loop_poles) < 1)
    assert d.margins.stable and d.pid.margins.stable
    # the loop broken at the input has the state-feedback closed loop as its poles
    assert d.margins.phase_margin_deg > 45


def test_lqr_nearest_pid_balances_the_rig():
    # The nearest PID + trim from the LQR, run on the simulated rig (with the unknown
    # offset δ and noise), keeps it up and brings the wheel back (board structure: ki = 0).
    d = design_lqr(TRUE_SPEED)
    p = d.pid
    fold = 1 + sum(d.k[4:])
    assert p.ki == 0.0 and p.kp == pytest.approx(-d.k[0] / fold)
    assert p.kd == pytest.approx(-d.k[1] / fold)
    r = simulate_balance(a=A_SPEED, c=C_SPEED, delta=0.8 * DEG, kp=p.kp, ki=0.0, kd=p.kd,
                         trim_p=p.details["trim_kp"], trim_i=p.details["trim_ki"],
                         t_end=12.0, seed=1, **NOISE)
    assert np.max(np.abs(r.true_tilt - 0.8 * DEG)) < 2 * DEG
    assert abs(np.mean(r.wheel[-500:])) < 0.5 * REV
    assert np.mean(r.true_tilt[-500:]) == pytest.approx(0.8 * DEG, abs=0.1 * DEG)


def test_margins_on_fitted_model_accept_balance_model():
    m = margins(LoopController(gain_to_si(0.64, "rev/s", "deg"),
                               gain_to_si(9.9, "rev/s", "deg", "1/s"), 0.0, h_s=DT,
                               direct_acting=True), TRUE_SPEED)
    assert m.stable and m.gain_margin_lower is not None and m.gain_margin_upper is not None
    # lower margin ≈ ki_min/ki = 3.5/9.9 with the lag and delay nudging it (docs/METHODS.md §6)
    assert m.gain_margin_lower == pytest.approx(3.47 / 9.9, rel=0.05)
