"""Wheel rig (DC motor + flywheel) against the closed-form DC motor model and scipy/control."""

from __future__ import annotations

import math
from dataclasses import replace

import control
import numpy as np
import pytest
import scipy.signal

from rigbench.rig.plants.catalog import Plant, WheelParams, WheelRig, make_wheel

DEMO = WheelParams()
LINEAR = replace(DEMO, coulomb_friction_Nm=0.0)


def rig(params=DEMO, noise=0.0, seed=0, **kw) -> WheelRig:
    return WheelRig(params, rng=np.random.default_rng(seed), noise=noise, **kw)


def steady_speed(p: WheelParams, u: float, load_Nm: float = 0.0) -> float:
    """Steady state of L·di/dt = u − R·i − K·ω, J·dω/dt = K·i − b·ω − Tc·sgn(ω) + τd:
    ω = (K·u + R·τd − R·Tc·sgn ω)/(K² + R·b), and 0 when |K·u + R·τd| ≤ R·Tc (the standard
    DC motor model, e.g. Hughes & Drury, Electric Motors and Drives)."""
    k, r = p.torque_constant_Nm_A, p.resistance_ohm
    drive = k * u + r * load_Nm
    if abs(drive) <= r * p.coulomb_friction_Nm:
        return 0.0
    return (drive - math.copysign(r * p.coulomb_friction_Nm, drive)) / (
        k * k + r * p.viscous_friction_Nms_rad)


def settle(w: WheelRig, u: float, seconds: float = 12.0) -> dict[str, float]:
    for _ in range(round(seconds / w.dt_s)):
        w.step(u)
    return w.truth()


@pytest.mark.parametrize("u", [12.0, 6.0, 1.0, -4.0, 0.2, 0.05, -0.05])
def test_step_steady_state_equals_static_gain(u):
    # 12 s is about 25 mechanical time constants: e^{-25} leaves nothing of the transient.
    w = rig()
    tr = settle(w, u)
    want = steady_speed(DEMO, u)
    assert tr["wheel_rad_s"] == pytest.approx(want, rel=1e-7, abs=1e-9)
    # current carries the friction torque: i = (u − K·ω)/R
    assert tr["current_A"] == pytest.approx((u - DEMO.torque_constant_Nm_A * want)
                                            / DEMO.resistance_ohm, rel=1e-7, abs=1e-12)


def test_demo_figures():
    # Figures in the WheelParams docstring, recomputed (closed form of the motor model).
    assert DEMO.electrical_time_constant_s == pytest.approx(2e-3 / 1.5)
    assert DEMO.mechanical_time_constant_s == pytest.approx(0.47, abs=0.005)
    assert DEMO.static_gain_rad_s_per_V == pytest.approx(39.0, abs=0.1)
    assert steady_speed(DEMO, 12.0) / (2 * math.pi) == pytest.approx(75, abs=1)


def test_linear_step_response_matches_scipy_and_python_control():
    # Without Coulomb friction the plant is ω/u = K/((L·s + R)(J·s + b) + K²), sampled
    # exactly: its step response equals the continuous one at every sample (ZOH step
    # invariance). References: scipy.signal.step and python-control step_response.
    p = LINEAR
    k, r, ind, j, b = (p.torque_constant_Nm_A, p.resistance_ohm, p.inductance_H,
                       p.inertia_kgm2, p.viscous_friction_Nms_rad)
    den = np.polyadd(np.polymul([ind, r], [j, b]), [k * k])
    w = rig(p)
    n = 1000
    y = []
    for _ in range(n):
        w.step(3.0)
        y.append(w.truth()["wheel_rad_s"])
    t = w.dt_s * np.arange(n + 1)
    _, ref = scipy.signal.step(([3.0 * k], den), T=t)
    ref_c = np.asarray(control.step_response(control.tf([3.0 * k], den), t).outputs)
    scale = 3.0 * p.static_gain_rad_s_per_V
    assert np.max(np.abs(np.array(y) - ref[1:])) < 1e-9 * scale
    assert np.max(np.abs(np.array(y) - ref_c[1:])) < 1e-9 * scale


def test_load_torque_lowers_the_speed_by_r_over_k_squared():
    # Droop under load: Δω = R·τd/(K² + R·b) (same model).
    w = rig()
    settle(w, 6.0)
    w.push(-0.01, 13.0)
    tr = settle(w, 6.0)
    assert tr["load_Nm"] == -0.01
    assert tr["wheel_rad_s"] == pytest.approx(steady_speed(DEMO, 6.0, -0.01), rel=1e-7)
    tr = settle(w, 6.0, 13.0)                # push over after 13 s
    assert tr["load_Nm"] == 0.0
    assert tr["wheel_rad_s"] == pytest.approx(steady_speed(DEMO, 6.0), rel=1e-6)


def test_coasting_wheel_stops_and_stays_stopped():
    # Coulomb friction brings the wheel to rest in finite time and holds it there
    # (common practice, no source): with u = 0 no drive torque remains once i decays.
    w = rig()
    settle(w, 2.0)
    speeds = [settle(w, 0.0, 0.01)["wheel_rad_s"] for _ in range(2000)]
    assert speeds[-1] == 0.0
    assert min(speeds) >= 0.0               # never pushed through zero
    stopped_at = speeds.index(0.0)
    assert all(s == 0.0 for s in speeds[stopped_at:])


def test_voltage_is_clipped_to_supply_and_bad_input_rejected():
    w = make_wheel(np.random.default_rng(0), noise=0.0, rate_hz=500)
    assert isinstance(w, Plant) and w.input_limits == (-12.0, 12.0)
    w.step(100.0)
    assert w.truth()["voltage_V"] == 12.0
    with pytest.raises(ValueError, match="finite"):
        w.step(float("nan"))
    with pytest.raises(ValueError, match="inertia_kgm2"):
        WheelParams(inertia_kgm2=0.0)
    with pytest.raises(TypeError):
        WheelParams(voltage=5.0)            # type: ignore[call-arg]
    with pytest.raises(ValueError, match="rate_hz"):
        make_wheel(rate_hz=-1.0)


def test_noise_levels_determinism_and_reset():
    # Noise figures are the rig's own; sample RMS of 5000 draws within ±5% (common practice,
    # no source). Same seed, same readings; reset starts over.
    def record(seed):
        w = make_wheel(np.random.default_rng(seed), noise=1.0)
        rows = []
        for _ in range(5000):
            w.step(0.0)                      # below breakaway: truth stays 0
            s = w.sensors()
            rows.append((s["wheel_rad_s"], s["current_A"]))
        return np.array(rows), w

    a, w = record(3)
    b, _ = record(3)
    c, _ = record(4)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    assert 0.95 * DEMO.speed_noise_rad_s < a[:, 0].std() < 1.05 * DEMO.speed_noise_rad_s
    assert 0.95 * DEMO.current_noise_A < a[:, 1].std() < 1.05 * DEMO.current_noise_A
    w.reset()
    assert w.truth()["wheel_rad_s"] == 0.0 and w.truth()["time_s"] == 0.0
