"""Balance rig (reaction-wheel pendulum) against closed-form mechanics and its linear model."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import scipy.integrate
import scipy.signal

from rigbench.rig.plants.catalog import BalanceParams, BalanceRig, ComplementaryFilter, Plant, make_balance

DEMO = BalanceParams()
# friction off, so the frictionless model of docs/METHODS.md §4 applies exactly
IDEAL = replace(DEMO, wheel_friction_Nms_rad=0.0, pivot_friction_Nms_rad=0.0)


def rig(params=IDEAL, drive="torque", noise=0.0, seed=0, **kw) -> BalanceRig:
    return BalanceRig(params, drive=drive, rng=np.random.default_rng(seed), noise=noise, **kw)


def mgl(p: BalanceParams) -> float:
    # computed here from the masses, not from the class's own property
    return (p.body_mass_kg + p.wheel_mass_kg) * p.gravity_m_s2 * p.com_height_m


def energy_J(p: BalanceParams, tr: dict[str, float]) -> float:
    """Kinetic + potential energy (Lagrangian of the rig: ½Jp·θ̇² + ½Jw·(θ̇+φ̇)²
    + mgl·cos(θ − δ)); Spong, Corke & Lozano (2001), Automatica 37."""
    th, w, v = tr["tilt_rad"], tr["rate_rad_s"], tr["wheel_rad_s"]
    return (0.5 * p.body_inertia_kgm2 * w * w + 0.5 * p.wheel_inertia_kgm2 * (w + v) ** 2
            + mgl(p) * math.cos(th - p.balance_offset_rad))


def measured_pole_rad_s(r: BalanceRig, start_rad=1e-3, until_rad=0.05) -> float:
    """Unstable pole from a fall: for x = θ − δ obeying ẍ = a²x, every solution satisfies
    x[k+1] + x[k−1] = 2·cosh(a·h)·x[k] whatever its start, so a follows by least squares."""
    delta = r.params.balance_offset_rad
    r.set_state(tilt_rad=delta + start_rad, rate_rad_s=0.0, wheel_rad_s=0.0)
    xs = [start_rad]
    while abs(xs[-1]) < until_rad:
        r.step(0.0)
        xs.append(r.truth()["tilt_rad"] - delta)
    x = np.array(xs)
    ch = np.sum(x[1:-1] * (x[2:] + x[:-2])) / (2.0 * np.sum(x[1:-1] ** 2))
    return math.acosh(ch) / r.dt_s


def test_demo_figures():
    # docs/METHODS.md §6 [calc]: mgl ≈ 1.0 N·m/rad, poles ≈ 9.1 rad/s (torque) and 8.8 rad/s (speed).
    assert DEMO.mgl_Nm_rad == pytest.approx(1.0, abs=0.005)
    assert DEMO.torque_drive_pole_rad_s == pytest.approx(9.1, abs=0.05)
    assert DEMO.speed_drive_pole_rad_s == pytest.approx(8.8, abs=0.05)


def test_free_fall_with_wheel_free_has_pole_sqrt_mgl_over_jp():
    # Torque zero: Jw·(θ̈ + φ̈) = 0 leaves Jp·θ̈ = mgl·sin(θ − δ), so the wheel's spin
    # inertia drops out and a = √(mgl/Jp) (Block, Åström & Spong (2007), The Reaction Wheel
    # Pendulum). Drive 'torque' with command 0 is the motor switched off.
    a = measured_pole_rad_s(rig(drive="torque"))
    a_ref = math.sqrt(mgl(IDEAL) / IDEAL.body_inertia_kgm2)
    assert a == pytest.approx(a_ref, rel=0.02)
    assert a == pytest.approx(a_ref, rel=1e-3)     # what it actually achieves (sin(x) ≈ x)
    # and it is not the held-wheel figure
    assert abs(a - math.sqrt(mgl(IDEAL) / (IDEAL.body_inertia_kgm2
                                           + IDEAL.wheel_inertia_kgm2))) > 0.2


def test_free_fall_with_wheel_held_has_pole_sqrt_mgl_over_jp_plus_jw():
    # Speed drive holding φ̇ = 0: the wheel turns with the body, the rig is one rigid body,
    # (Jp + Jw)·θ̈ = mgl·sin(θ − δ), a = √(mgl/(Jp + Jw)) (same source).
    a = measured_pole_rad_s(rig(drive="speed"))
    a_ref = math.sqrt(mgl(IDEAL) / (IDEAL.body_inertia_kgm2 + IDEAL.wheel_inertia_kgm2))
    assert a == pytest.approx(a_ref, rel=0.02)
    assert a == pytest.approx(a_ref, rel=1e-3)


def test_energy_conserved_without_friction_or_torque():
    # Conservative system (Lagrangian, no friction, no input): energy is constant. Stops off
    # so the rig swings over the top for 10 s; RK4 at 2 ms keeps it within 1e-6 of 2·mgl.
    p = replace(IDEAL, tilt_stop_rad=math.inf)
    r = rig(p, drive="torque")
    r.set_state(tilt_rad=0.3, rate_rad_s=1.0, wheel_rad_s=20.0)
    e0 = energy_J(p, r.truth())
    worst = 0.0
    widest = 0.0
    for _ in range(5000):
        r.step(0.0)
        worst = max(worst, abs(energy_J(p, r.truth()) - e0))
        widest = max(widest, abs(r.truth()["tilt_rad"]))
    assert widest > math.pi             # over the bottom: a large, strongly nonlinear motion
    assert worst < 1e-6 * 2 * mgl(p)


def test_energy_change_equals_motor_work():
    # With torque held over each step, the motor does work τ·Δφ per step (power τ·φ̇ on the
    # relative wheel angle); energy balance of the Lagrangian system (same source).
    p = replace(IDEAL, tilt_stop_rad=math.inf)
    r = rig(p, drive="torque")
    r.set_state(tilt_rad=0.2)
    e0 = energy_J(p, r.truth())
    work = 0.0
    worst = 0.0
    for k in range(2500):
        tau = 0.2 * math.sin(2 * math.pi * 1.3 * k * r.dt_s)
        ph0 = r.truth()["wheel_angle_rad"]
        r.step(tau)
        tr = r.truth()
        assert tr["torque_Nm"] == tau                       # below every limit here
        work += tau * (tr["wheel_angle_rad"] - ph0)
        worst = max(worst, abs(energy_J(p, tr) - e0 - work))
    assert abs(work) > 0.05
    assert worst < 1e-6 * 2 * mgl(p)


def test_energy_lost_equals_friction_dissipation():
    # Bearing friction is internal between body and wheel, so it dissipates b_w·φ̇² (relative
    # speed squared) and pivot friction b_p·θ̇²: dE/dt = τ·φ̇ − b_w·φ̇² − b_p·θ̇² (energy
    # balance of the Lagrangian system with Rayleigh dissipation; e.g. Goldstein, Classical
    # Mechanics, 3rd ed., §1.5). Had the friction reaction been left off the body, the loss
    # would be b_w·φ̇·(θ̇ + φ̇) instead, about 20% less in this run.
    p = replace(DEMO, wheel_friction_Nms_rad=2e-3, pivot_friction_Nms_rad=1e-3,
                tilt_stop_rad=math.inf)
    r = rig(p, drive="torque")
    r.set_state(tilt_rad=2.0, wheel_rad_s=40.0)
    trs = [r.truth()]
    for _ in range(2500):
        r.step(0.0)
        trs.append(r.truth())
    v = np.array([t["wheel_rad_s"] for t in trs])
    w = np.array([t["rate_rad_s"] for t in trs])
    lost = energy_J(p, trs[0]) - energy_J(p, trs[-1])
    dissipated = scipy.integrate.simpson(p.wheel_friction_Nms_rad * v * v
                                         + p.pivot_friction_Nms_rad * w * w, dx=r.dt_s)
    assert dissipated > 0.5
    assert lost == pytest.approx(dissipated, rel=1e-6)


def test_torque_drive_sign_and_initial_accelerations():
    # From rest at the balance point: θ̈ = −τ/Jp and φ̈ = τ/Jw + τ/Jp (docs/METHODS.md §4 equations):
    # a positive torque spins the wheel forward and tilts the body backward.
    r = rig(drive="torque")
    r.set_state(tilt_rad=IDEAL.balance_offset_rad)
    tau, h = 0.05, r.dt_s
    r.step(tau)
    tr = r.truth()
    jp, jw = IDEAL.body_inertia_kgm2, IDEAL.wheel_inertia_kgm2
    assert tr["rate_rad_s"] == pytest.approx(-tau / jp * h, rel=1e-3)
    assert tr["wheel_rad_s"] == pytest.approx(tau * (1 / jw + 1 / jp) * h, rel=1e-3)
    assert tr["tilt_rad"] - IDEAL.balance_offset_rad == pytest.approx(-0.5 * tau / jp * h * h,
                                                                      rel=1e-3)


@pytest.mark.parametrize("drive", ["torque", "speed"])
def test_small_signal_response_matches_linear_model(drive):
    # docs/METHODS.md §4 (Block, Åström & Spong 2007): θ/τ = −(1/Jp)/(s² − mgl/Jp);
    # θ/ω_cmd = −c·s·H(s)/(s² − mgl/Jt), H = 1/(T·s + 1), c = Jw/Jt. Reference response from
    # scipy.signal.lsim with a zero-order-held input.
    p = IDEAL
    jp, jw, T = p.body_inertia_kgm2, p.wheel_inertia_kgm2, p.driver_lag_s
    jt = jp + jw
    if drive == "torque":
        sys = ([-1.0 / jp], [1.0, 0.0, -mgl(p) / jp])
        amp = 1e-4
    else:
        sys = ([-jw / jt, 0.0], np.polymul([T, 1.0], [1.0, 0.0, -mgl(p) / jt]))
        amp = 0.01
    r = rig(p, drive=drive)
    r.set_state(tilt_rad=p.balance_offset_rad)
    n = 300
    t = r.dt_s * np.arange(n + 1)
    u = amp * np.where(t < 0.2, 1.0, -0.7)
    theta = [0.0]
    wheel = [0.0]
    for k in range(n):
        r.step(float(u[k]))
        theta.append(r.truth()["tilt_rad"] - p.balance_offset_rad)
        wheel.append(r.truth()["wheel_rad_s"])
    _, ref, _ = scipy.signal.lsim(sys, u, t, interp=False)
    theta = np.array(theta)
    assert 1e-3 < np.max(np.abs(theta)) < 0.01      # small signal, yet well above rounding
    # sin(x) ≈ x costs x²/6 < 2e-5 here; RK4 at 2 ms adds less
    assert np.max(np.abs(theta - ref)) < 1e-4 * np.max(np.abs(ref))
    assert theta[5] < 0.0                            # positive command tilts it back first
    if drive == "speed":
        # the driver's wheel speed is the first-order lag of the command (docs/METHODS.md §4 H(s))
        _, wref, _ = scipy.signal.lsim(([1.0], [T, 1.0]), u, t, interp=False)
        # RK4 at h/T = 0.25 follows e^{-h/T} to (h/T)^5/120 ≈ 8e-6 per step
        assert np.max(np.abs(np.array(wheel) - wref)) < 1e-4 * amp


def test_speed_drive_saturates_at_torque_limit_and_clips_command():
    # Limits by construction of the driver (common practice, no source): the command is
    # clipped to ±50 rev/s and the torque to ±0.30 N·m.
    r = rig(DEMO, drive="speed")
    r.set_state(tilt_rad=DEMO.balance_offset_rad)
    r.step(1e4)
    assert r.truth()["torque_Nm"] == pytest.approx(DEMO.torque_limit_Nm)
    assert r.input_limits == (-100 * math.pi, 100 * math.pi)


def test_torque_falls_off_along_the_motor_line_near_top_speed():
    # Resting on a stop, full forward torque spins the wheel up; the torque available while
    # motoring follows the DC motor's straight torque–speed line τ = τs·(1 − ω/ω0), capped at
    # the limit (e.g. Hughes & Drury, Electric Motors and Drives).
    p = DEMO
    r = rig(p, drive="torque", initial_tilt_rad=-p.tilt_stop_rad)
    seen = []
    for _ in range(5000):
        r.step(p.torque_limit_Nm)
        tr = r.truth()
        seen.append((tr["wheel_rad_s"], tr["torque_Nm"]))
    assert r.truth()["on_stop"] == 1.0
    for i in (50, 500, 1500, 2500, 4999):
        v_prev = seen[i - 1][0]           # torque of a step is taken at its start
        want = min(p.torque_limit_Nm, p.stall_torque_Nm * (1 - v_prev / p.free_speed_rad_s))
        assert seen[i][1] == pytest.approx(want, rel=1e-3, abs=1e-6)
    assert seen[-1][0] > 50 * 2 * math.pi            # well into the fall-off region
    assert seen[-1][0] < p.free_speed_rad_s


def test_fall_ends_on_stop_and_wheel_keeps_absolute_speed():
    # The stop's impulse acts on the body only, so the wheel's absolute speed θ̇ + φ̇ is
    # unchanged through the inelastic impact (conservation of the wheel's angular momentum
    # about its axle, which no impulse reaches); without torque or friction it is constant.
    r = rig(drive="torque")
    r.set_state(tilt_rad=0.05, wheel_rad_s=30.0)
    for _ in range(1000):
        r.step(0.0)
    tr = r.truth()
    assert tr["on_stop"] == 1.0
    assert tr["tilt_rad"] == pytest.approx(IDEAL.tilt_stop_rad)
    assert tr["rate_rad_s"] == 0.0
    assert tr["wheel_rad_s"] == pytest.approx(30.0, rel=1e-9)
    # a push back towards upright lifts it off the stop: Jp·θ̈ = mgl·sin(θ − δ) + τd < 0
    r.push(-1.0, 0.05)
    r.step(0.0)
    assert r.truth()["rate_rad_s"] < 0.0
    assert r.truth()["on_stop"] == 0.0


def test_push_acts_on_the_body_for_its_duration():
    # τd enters the body equation with a plus sign (docs/METHODS.md §4): θ̈ = τd/Jp at balance.
    r = rig(drive="torque")
    r.set_state(tilt_rad=IDEAL.balance_offset_rad)
    r.push(0.04, 0.01)
    r.step(0.0)
    assert r.truth()["push_Nm"] == 0.04
    assert r.truth()["rate_rad_s"] == pytest.approx(0.04 / IDEAL.body_inertia_kgm2
                                                         * r.dt_s, rel=1e-3)
    for _ in range(4):
        r.step(0.0)
    assert r.truth()["push_Nm"] == 0.0
    rate = r.truth()["rate_rad_s"]
    assert rate == pytest.approx(0.04 / IDEAL.body_inertia_kgm2 * 0.01, rel=0.01)


def test_sensor_noise_bias_and_determinism():
    # Noise figures are the demo rig's own (docs/METHODS.md §6); 5000 normal draws give a sample RMS
    # within ±5% and a mean within 4σ/√n (common practice, no source).
    def record(seed):
        r = make_balance("torque", np.random.default_rng(seed), noise=1.0)
        r.set_state(tilt_rad=-DEMO.tilt_stop_rad)      # resting: truth is constant
        rows = []
        for _ in range(5000):
            r.step(0.0)
            s, tr = r.sensors(), r.truth()
            rows.append((s["accel_tilt_rad"] - tr["tilt_rad"],
                         s["gyro_rad_s"] - tr["rate_rad_s"],
                         s["wheel_rad_s"] - tr["wheel_rad_s"]))
        return np.array(rows)

    a, b, c = record(5), record(5), record(6)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    n = len(a)
    for col, bias, sd in ((0, DEMO.accel_bias_rad, DEMO.tilt_noise_rad),
                          (1, DEMO.gyro_bias_rad_s, DEMO.gyro_noise_rad_s),
                          (2, 0.0, DEMO.wheel_speed_noise_rad_s)):
        assert abs(a[:, col].mean() - bias) < 4 * sd / math.sqrt(n)
        assert 0.95 * sd < a[:, col].std() < 1.05 * sd


def test_encoder_speed_is_count_difference_over_the_period():
    # An incremental encoder read once per period: speed = Δcounts·2π/(CPR·dt), a whole
    # number of counts per period; the mean over many periods equals the true mean speed
    # (common practice, no source).
    p = DEMO
    r = rig(p, drive="torque", initial_tilt_rad=-p.tilt_stop_rad)
    q = 2 * math.pi / p.counts_per_rev / r.dt_s
    ang0 = r.truth()["wheel_angle_rad"]
    speeds = []
    for _ in range(500):
        r.step(0.05)
        speeds.append(r.sensors()["wheel_rad_s"])
    counts = np.array(speeds) / q
    assert np.allclose(counts, np.round(counts), atol=1e-6)
    true_mean = (r.truth()["wheel_angle_rad"] - ang0) / (500 * r.dt_s)
    assert np.mean(speeds) == pytest.approx(true_mean, abs=q / 500)


def test_complementary_filter_steady_error_is_gyro_bias_times_time_constant():
    # tilt = a·(tilt + g·dt) + (1 − a)·accel, a = T/(T + dt): with a constant true tilt and
    # gyro bias b the fixed point is tilt + b·T (closed form; common practice, no source).
    f = ComplementaryFilter(time_constant_s=0.4, dt_s=0.002)
    for _ in range(5000):
        est = f.update(0.1, 0.01)
    assert est == pytest.approx(0.1 + 0.01 * 0.4, rel=1e-9)
    f.reset()
    assert f.update(-0.2, 5.0) == -0.2          # first sample starts from the accelerometer


def test_plant_protocol_reset_and_bad_input():
    r = make_balance("speed", np.random.default_rng(1), noise=1.0, rate_hz=500)
    assert isinstance(r, Plant) and r.dt_s == 0.002 and r.substeps == 1
    first = []
    for _ in range(50):
        r.step(3.0)
        first.append(r.truth()["tilt_rad"])
    r.reset()
    again = []
    for _ in range(50):
        r.step(3.0)
        again.append(r.truth()["tilt_rad"])
    assert first == again
    assert make_balance("torque", rate_hz=250).substeps == 2
    with pytest.raises(ValueError, match="drive"):
        make_balance("current")
    with pytest.raises(ValueError, match="finite"):
        r.step(float("nan"))
    with pytest.raises(ValueError, match="rate_hz"):
        make_balance("speed", rate_hz=0)
    with pytest.raises(ValueError, match="body_inertia_kgm2"):
        BalanceParams(body_inertia_kgm2=-1.0)
    with pytest.raises(TypeError):
        BalanceParams(mass=1.0)                  # type: ignore[call-arg]
    with pytest.raises(ValueError, match="stops"):
        r.set_state(tilt_rad=1.0)


def test_accelerometer_above_the_pivot_sees_tangential_acceleration():
    # An accelerometer at height r on the body measures specific force; along the body's
    # axes that is (g·sinθ − r·θ̈, g·cosθ − r·θ̇²), so its tilt reading is
    # atan2(g·sinθ − r·θ̈, g·cosθ − r·θ̇²) (rigid-body kinematics, common practice, no
    # source). At the balance point with a push, θ̈ = τd/Jp.
    p = replace(IDEAL, imu_height_m=0.12)
    r = rig(p, drive="torque")
    r.set_state(tilt_rad=p.balance_offset_rad)
    r.push(0.1, 1.0)
    r.step(0.0)
    tr, s = r.truth(), r.sensors()
    th, w = tr["tilt_rad"], tr["rate_rad_s"]
    thdd = (mgl(p) * math.sin(th - p.balance_offset_rad) + 0.1) / p.body_inertia_kgm2
    g = p.gravity_m_s2
    want = math.atan2(g * math.sin(th) - 0.12 * thdd, g * math.cos(th) - 0.12 * w * w)
    assert s["accel_tilt_rad"] == pytest.approx(want, rel=1e-12)
    assert s["accel_tilt_rad"] < th - 0.05          # the push shows as a large false tilt
