"""fit_balance_model on short records: a clear BalanceFitError where the record cannot
identify the model, a model where a short record is excited."""

import math
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from balance_sim import prbs, simulate_balance  # noqa: E402

from rigbench.tuning.balance import BalanceFitError, fit_balance_model  # noqa: E402
from rigbench.base.units import gain_to_si  # noqa: E402

DEG, REV, DT = math.pi / 180, 2 * math.pi, 0.002
# the invented demo rig of docs/METHODS.md §6 (demo numbers), as in test_tuning_balance.py
A_SPEED = math.sqrt(1.0 / (0.0120 + 8.0e-4))
C_SPEED = 8.0e-4 / (0.0120 + 8.0e-4)
NOISE = dict(tilt_noise=0.03 * DEG, gyro_noise=0.2 * DEG, wheel_noise=0.05 * REV)


def run(excitation, seed=0):
    # the stabilising start of docs/METHODS.md §6, with the wheel-speed trim
    return simulate_balance(a=A_SPEED, c=C_SPEED, delta=0.8 * DEG,
                            kp=gain_to_si(0.64, "rev/s", "deg"),
                            ki=gain_to_si(9.9, "rev/s", "deg", "1/s"),
                            kd=gain_to_si(0.01, "rev/s", "deg"), trim_p=-0.2 * DEG / REV,
                            trim_i=-0.05 * DEG / REV, t_end=4.0, excitation=excitation,
                            seed=seed, **NOISE)


def window(r, start_s, seconds):
    sl = slice(int(start_s / DT), int((start_s + seconds) / DT))
    return r.t[sl], r.tilt[sl], r.gyro[sl], r.wheel[sl], r.command[sl]


def test_an_unexcited_window_is_refused_with_the_reason():
    # 1.5 s of the rig balancing quietly: the command hardly moves the wheel beyond its
    # drift, and the actuator's least-squares pole is no lag by two standard errors (at or
    # within 2σ of 1) (common practice, no source: an unexcited record cannot identify a
    # model; it must say so, not fail later)
    with pytest.raises(BalanceFitError, match=r"driver lag not identified.*α = \d\.\d+ ± "):
        fit_balance_model(*window(run(None), 1.0, 1.5), dt=DT)
    # callers that catch ValueError (the experiments) still do
    assert issubclass(BalanceFitError, ValueError)


def test_a_record_shorter_than_the_filter_needs_is_refused():
    with pytest.raises(BalanceFitError, match="too short"):
        fit_balance_model(*window(run(prbs(1.0 * DEG)), 1.0, 0.45), dt=DT)


def test_a_short_excited_window_still_fits():
    # 1 s with the PRBS set-point excitation: the unstable pole within 5% of the
    # simulator's (docs/METHODS.md §6 [calc]: a = sqrt(mgl/(Jp + Jw)) ≈ 8.8 rad/s) and the
    # driver lag within 10% of its 8 ms
    fit = fit_balance_model(*window(run(prbs(1.0 * DEG)), 1.0, 1.0), dt=DT)
    assert fit.a == pytest.approx(A_SPEED, rel=0.05)
    assert fit.tau_e_s == pytest.approx(0.008, rel=0.1)
