"""Relay autotune on simulated linear plants (sim://plant, virtual clock): the measured
point against python-control, Ku and Tu against the describing-function error band, and
the gain proposals' predicted margins."""

import math

import control
import numpy as np
import pytest

from rigbench.experiments.proposals import propose
from rigbench.experiments.relay import run_relay

# docs/METHODS.md §3 plants: url num, den, dead time; exact Ku, Tu [calc, python-control];
# describing-function errors of an ideal relay on these plants, period and Ku [calc]
PLANTS = {
    "lag3": ("1", "1,3,3,1", 0.0, 8.0000, 3.6276, 0.014, -0.024),
    "fopdt": ("1", "1,1", 1.0, 2.2618, 3.0971, -0.038, -0.11),
    "sopdt": ("1", "1,2,1", 0.5, 4.6879, 3.2718, 0.011, -0.054),
}

_runs = {}


def _relay(open_sim, name, noise):
    key = (name, noise)
    if key not in _runs:
        num, den, delay, *_ = PLANTS[name]
        link = open_sim(f"sim://plant?num={num}&den={den}&delay={delay}&noise={noise}&seed=3")
        _runs[key] = run_relay(link, "main", max_s=60.0)
    return _runs[key]


def _reference(name, omega):
    # G(jω) from python-control, dead time as e^{-jωL}
    num, den, delay, *_ = PLANTS[name]
    g = control.tf([float(x) for x in num.split(",")], [float(x) for x in den.split(",")])
    return complex(g(1j * omega)) * np.exp(-1j * omega * delay)


@pytest.mark.parametrize("noise,gain_tol,phase_tol_deg", [(0, 0.01, 1.0), (1, 0.03, 2.0)])
@pytest.mark.parametrize("name", list(PLANTS))
def test_measured_point_is_the_plant_response(open_sim_shared, name, noise, gain_tol, phase_tol_deg):
    run = _relay(open_sim_shared, name, noise)
    assert run.converged, run.reason
    p = run.point
    g = _reference(name, p.omega_rad_s)
    # python-control G(jω) at the measured ω: 1% / 1° without noise, 3% / 2° with noise
    # (brief's tolerances; Y1/U1 over whole periods is exact, Åström & Hägglund 1984)
    assert p.gain == pytest.approx(abs(g), rel=gain_tol)
    dphi = (p.phase_deg - math.degrees(np.angle(g)) + 180.0) % 360.0 - 180.0
    assert abs(dphi) < phase_tol_deg
    # the third harmonic is a second exact point, G(3jω)
    p3 = run.points[1]
    assert p3.omega_rad_s == pytest.approx(3 * p.omega_rad_s)
    assert p3.gain == pytest.approx(abs(_reference(name, p3.omega_rad_s)), rel=3 * gain_tol)


@pytest.mark.parametrize("noise", [0, 1])
@pytest.mark.parametrize("name", list(PLANTS))
def test_ku_tu_within_describing_function_band(open_sim_shared, name, noise):
    _, _, _, ku, tu, df_period, df_ku = PLANTS[name]
    run = _relay(open_sim_shared, name, noise)
    # docs/METHODS.md §3 [calc]: describing-function errors of an ideal relay on these plants;
    # band ±2 points for the hysteresis (2× noise RMS) and 2 ms sampling
    assert run.tu_s / tu - 1 == pytest.approx(df_period, abs=0.02)
    assert run.ku / ku - 1 == pytest.approx(df_ku, abs=0.02)


def test_automatic_amplitude_and_hysteresis_follow_the_noise(open_sim_shared):
    run = _relay(open_sim_shared, "sopdt", 1)
    s = run.settings
    assert s.automatic
    # docs/METHODS.md §3 (common practice): hysteresis ≈ 2× noise RMS, oscillation ≥ 10× noise
    assert s.hysteresis == pytest.approx(2 * run.noise_rms, rel=1e-9)
    assert run.noise_rms == pytest.approx(1e-3, rel=0.2)  # the plant's declared noise
    assert run.analysis.amplitude >= 10 * run.noise_rms


@pytest.mark.filterwarnings("ignore:stability_margins")
def test_proposals_on_a_stable_plant(open_sim_shared):
    # without noise: the upper gain margin of a PID on this plant lies near the Nyquist
    # frequency, where a dead time of one sample fitted from noisy points moves it by 10%
    run = _relay(open_sim_shared, "lag3", 0)
    ps = propose(run)
    # the rules take Ku, Tu at the fitted model's −180° crossing: the exact ultimate point
    # of 1/(s+1)^3 is Ku = 8, Tu = 3.6276 s (docs/METHODS.md §3 [calc])
    assert ps.ultimate["ku"] == pytest.approx(8.0, rel=0.02)
    assert ps.ultimate["tu_s"] == pytest.approx(3.6276, rel=0.01)
    zn = ps.by_rule("ziegler-nichols-pid")
    # Ziegler & Nichols (1942): K = 0.6 Ku, Ti = Tu/2, Td = Tu/8 in parallel form
    assert zn.kp == pytest.approx(0.6 * ps.ultimate["ku"])
    assert zn.ki == pytest.approx(zn.kp / (ps.ultimate["tu_s"] / 2))
    assert zn.gains == {"main_kp": zn.kp, "main_ki": zn.ki, "main_kd": zn.kd}
    # AMIGO needs a static gain: an unbiased relay has none (Åström & Hägglund 2006)
    assert not ps.by_rule("amigo-pid").applies
    # margins predicted on the fitted model agree with python-control's margins of the
    # same discrete loop (2 ms, backward-Euler integral, filtered derivative) on the true
    # plant, discretised by python-control with a zero-order hold
    h, tf = 0.002, run.loop.dfilt_s
    z = control.tf([1.0, 0.0], [1.0], h)
    c = zn.kp + zn.ki * h * z / (z - 1) + zn.kd * (z - 1) / ((tf + h) * z - tf)
    plant = control.c2d(control.tf([1.0], [1.0, 3.0, 3.0, 1.0]), h, "zoh")
    gm, pm, _, _ = control.margin(c * plant)
    assert zn.margins.gain_margin_upper == pytest.approx(gm, rel=0.05)
    assert zn.margins.phase_margin_deg == pytest.approx(pm, abs=2.0)
    ranked = sorted((p for p in ps.proposals if p.rank), key=lambda p: p.rank)
    assert ranked and all(p.predicted_stable for p in ranked)
    assert ps.best() is ranked[0]


@pytest.mark.parametrize("filtered", [False, True])
def test_wheel_speed_loop_widens_the_hysteresis_and_measures_the_motor(open_sim, filtered):
    # a DC motor and flywheel has little phase lag: under a relay with a narrow band it
    # chatters at the sampling limit, so the band (not the amplitude) must grow. Run with
    # the raw encoder speed and with the board's wheel-speed filter (its default).
    link = open_sim("sim://wheel?seed=1")
    link.set(speed_sp=20.0)  # away from zero speed, where Coulomb friction dominates
    if not filtered:
        link.set(wheel_tc_s=0.0)
    run = run_relay(link, "speed", max_s=60.0)
    assert run.converged, run.reason
    assert run.settings.hysteresis > 5 * run.noise_rms
    p = link.port.board.plant.params
    w, h = run.point.omega_rad_s, link.port.board.dt_s
    s = 1j * w
    kt, r, ind, j, b = (p.torque_constant_Nm_A, p.resistance_ohm, p.inductance_H,
                        p.inertia_kgm2, p.viscous_friction_Nms_rad)
    # the permanent-magnet DC motor (Hughes & Drury, Electric Motors and Drives) in rev/s
    # per V, measured as an encoder count difference over one period (its mean speed)
    # through the board's first-order filter w[k] = w[k−1] + a·(raw[k] − w[k−1]),
    # a = h/(tc + h): a·z/(z − (1 − a)) at z = e^{jωh} (its z-transform, textbook)
    g = kt / ((ind * s + r) * (j * s + b) + kt * kt) / (2 * math.pi)
    g *= (1 - np.exp(-s * h)) / (s * h)
    a, z = h / (link.get("wheel_tc_s")["wheel_tc_s"] + h), np.exp(s * h)
    g *= a * z / (z - (1 - a))
    assert run.point.gain == pytest.approx(abs(g), rel=0.02)
    dphi = (run.point.phase_deg - math.degrees(np.angle(g)) + 180.0) % 360.0 - 180.0
    assert abs(dphi) < 1.5
    ps = propose(run)
    # the cycle sits far from −180°: the ultimate-point rules say so, the one-point
    # design (Åström & Hägglund 1984) still applies and is predicted stable
    assert not ps.by_rule("ziegler-nichols-pid").applies
    ah = ps.by_rule("astrom-hagglund-pm-pi")
    assert ah.applies and ah.predicted_stable
    if filtered:  # the filter's lag makes the plant second order: no K/T to check
        return
    # the cycle is far above the motor's corner, where the points fix K/T of a first-order
    # model: the motor's Kt/(J·R) (Hughes & Drury: static gain over the mechanical time
    # constant), in rev/s per V per s, within 5%
    assert ps.model.order == 1
    k_over_t = p.static_gain_rad_s_per_V / p.mechanical_time_constant_s / (2 * math.pi)
    assert ps.model.gain / ps.model.time_constant_s == pytest.approx(k_over_t, rel=0.05)


def test_biased_relay_measures_the_static_gain_and_amigo_applies(open_sim):
    link = open_sim("sim://plant?num=2&den=1,2,1&delay=0.5&seed=2")
    run = run_relay(link, "main", bias=0.4, max_s=60.0)
    assert run.converged, run.reason
    # ∫y dt/∫u dt over whole periods of a biased relay is the static gain (Shen, Wu & Yu
    # 1996, value from memory; docs/METHODS.md §3 [calc]: within 0.3%); the plant's is 2
    assert run.static_gain == pytest.approx(2.0, rel=0.01)
    ps = propose(run)
    assert ps.model.static_gain_used and ps.model.gain == pytest.approx(2.0, rel=0.01)
    amigo = ps.by_rule("amigo-pid")
    ku = ps.ultimate["ku"]
    kappa = 1.0 / (run.static_gain * ku)
    # Åström & Hägglund (2006), Advanced PID Control, ch. 7: K = (0.3 − 0.1κ⁴)Ku
    assert amigo.applies and amigo.kp == pytest.approx((0.3 - 0.1 * kappa ** 4) * ku)
    # 2e^{-0.5s}/(s+1)^2: Ku = 4.6879/2 (docs/METHODS.md §3 [calc], gain scaled by 2)
    assert ku == pytest.approx(4.6879 / 2, rel=0.02)
