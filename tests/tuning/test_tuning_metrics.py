"""Sweep and step metrics against python-control's step_info and closed forms."""

import math

import control
import numpy as np
import pytest

from rigbench.tuning.metrics import (DisturbanceMetrics, disturbance_metrics, step_metrics,
                                  summarise)


@pytest.mark.parametrize("num, den", [
    ([1.0], [1.0, 0.6, 1.0]),             # underdamped
    ([-2.0], [1.0, 0.6, 1.0]),            # negative final value
    ([-1.0, 1.0], [1.0, 1.0, 1.0]),       # non-minimum phase: undershoot
    ([1.0], [1.0, 3.0, 3.0, 1.0]),        # monotone
])
def test_step_metrics_match_python_control_step_info(num, den):
    sys = control.tf(num, den)
    t = np.linspace(0, 40, 4001)
    resp = control.step_response(sys, t)
    y = np.squeeze(resp.outputs)
    ref = control.step_info(y, t)  # python-control step_info on the same samples
    m = step_metrics(t, y)
    assert m.rise_time_s == pytest.approx(ref["RiseTime"], abs=1e-12)
    assert m.settling_time_s == pytest.approx(ref["SettlingTime"], abs=1e-12)
    assert m.settling_min == pytest.approx(ref["SettlingMin"])
    assert m.settling_max == pytest.approx(ref["SettlingMax"])
    assert m.overshoot_pct == pytest.approx(ref["Overshoot"])
    assert m.undershoot_pct == pytest.approx(ref["Undershoot"])
    assert m.peak == pytest.approx(ref["Peak"])
    assert m.peak_time_s == pytest.approx(ref["PeakTime"])


def test_step_overshoot_second_order_closed_form():
    # Overshoot of ωn²/(s² + 2ζωn s + ωn²): 100·exp(−ζπ/√(1−ζ²)) % (classical result)
    zeta = 0.3
    t = np.linspace(0, 30, 30001)
    y = np.squeeze(control.step_response(control.tf([1.0], [1.0, 2 * zeta, 1.0]), t).outputs)
    m = step_metrics(t, y, final_value=1.0)
    assert m.overshoot_pct == pytest.approx(100 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta ** 2)),
                                            rel=1e-4)
    assert step_metrics(t, 0 * y).overshoot_pct is None


def test_disturbance_metrics_of_exponential_decay():
    # e = A e^{−(t−t0)/τ} after t0: IAE = Aτ, ITAE = Aτ², ISE = A²τ/2, settling into band b
    # at τ ln(A/b) (analytic; finite record of 40τ, fine sampling).
    amp, tau, t0, band = 0.05, 0.2, 1.0, 0.001
    t = np.linspace(0, t0 + 40 * tau, 90001)  # step 1e-4 s, t0 on the grid
    e = np.where(t >= t0, amp * np.exp(-(t - t0) / tau), 0.0)
    m = disturbance_metrics(t, e, band=band, t0_s=t0)
    assert m.peak_abs_error == pytest.approx(amp, rel=1e-9)
    assert m.peak_time_s == pytest.approx(0.0, abs=1e-9)
    assert m.opposite_ratio == 0.0
    assert m.iae == pytest.approx(amp * tau, rel=1e-4)
    assert m.itae == pytest.approx(amp * tau ** 2, rel=1e-4)
    assert m.ise == pytest.approx(amp ** 2 * tau / 2, rel=1e-4)
    assert m.settling_time_s == pytest.approx(tau * math.log(amp / band), abs=1e-3)
    assert m.peak_wheel_change is None and m.fell is None


def test_disturbance_metrics_of_damped_oscillation():
    # e = e^{−ζωn t} sin(ωd t): first peak at atan(√(1−ζ²)/ζ)/ωd; the next (opposite-sign)
    # extreme is smaller by exp(−ζπ/√(1−ζ²)) (logarithmic decrement, classical result).
    zeta, wn = 0.2, 10.0
    wd = wn * math.sqrt(1 - zeta ** 2)
    t = np.linspace(0, 5, 50001)
    e = np.exp(-zeta * wn * t) * np.sin(wd * t)
    m = disturbance_metrics(t, e, band=1e-3, fall_threshold=1.0)
    assert m.peak_time_s == pytest.approx(math.atan(math.sqrt(1 - zeta ** 2) / zeta) / wd,
                                          abs=2e-4)
    assert m.opposite_ratio == pytest.approx(math.exp(-zeta * math.pi / math.sqrt(1 - zeta ** 2)),
                                             rel=1e-4)
    assert m.fell is False
    assert disturbance_metrics(t, 3 * e, band=1e-3, fall_threshold=1.0).fell is True


def test_wheel_and_command_figures():
    t = np.arange(0, 3, 0.001)
    t0 = 1.0
    base = 5.0
    bump = np.where(t >= t0, 4.0 * np.exp(-(t - t0) / 0.3), 0.0)
    wheel = base + bump
    cmd = np.clip(20 * np.sin(2 * np.pi * t), -10, 10)
    m = disturbance_metrics(t, 0.01 * bump, band=1e-4, t0_s=t0, wheel=wheel, wheel_limit=8.0,
                            command=cmd, command_limit=10.0)
    assert m.peak_wheel_change == pytest.approx(4.0)
    # |Δw| falls to 10% of its peak at 0.3·ln 10 s (analytic)
    assert m.wheel_recovery_time_s == pytest.approx(0.3 * math.log(10), abs=2e-3)
    # wheel ≥ 0.99·8 while 4e^{−x/0.3} ≥ 2.92: 0.3·ln(4/2.92) s
    assert m.time_at_wheel_limit_s == pytest.approx(0.3 * math.log(4 / 2.92), abs=2e-3)
    # |20 sin| ≥ 9.9 for 2/3 − 2·asin(0.495)/π of each period; two periods after t0
    frac = 1 - 4 * math.asin(9.9 / 20) / (2 * math.pi)
    assert m.time_at_command_limit_s == pytest.approx(2 * frac, abs=3e-3)
    # total variation of the clipped sine: 40 per period (up 10, down 20, up 10), less the
    # part of the last rise cut off by the end of the record
    assert m.command_total_variation == pytest.approx(2 * 40.0 - abs(cmd[-1]), rel=1e-6)


def test_summarise_mean_and_spread():
    ms = [disturbance_metrics(np.linspace(0, 1, 101), a * np.exp(-np.linspace(0, 1, 101) * 5),
                              band=0.01, fall_threshold=0.25) for a in (0.1, 0.2, 0.3)]
    s = summarise(ms)
    peaks = np.array([0.1, 0.2, 0.3])
    assert s["peak_abs_error"].mean == pytest.approx(peaks.mean())
    assert s["peak_abs_error"].std == pytest.approx(peaks.std(ddof=1))
    assert s["peak_abs_error"].min == 0.1 and s["peak_abs_error"].max == 0.3
    assert s["fell"].mean == pytest.approx(1 / 3)
    assert s["peak_wheel_change"].count == 0 and s["peak_wheel_change"].mean is None
    assert set(s) == {f for f in DisturbanceMetrics.__dataclass_fields__}
    assert summarise([]) == {}
