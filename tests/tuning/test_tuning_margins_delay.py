"""Margins of loops with long dead times (the split of L into a rational part and a pure
delay, the Nyquist count of discrete loops of high degree) against analytic results and
python-control."""

import math

import control
import numpy as np
import pytest

from rigbench.tuning.loop import LoopController, PlantModel, loop_transfer
from rigbench.tuning.margins import EIG_MAX_STATES, margins

pytestmark = pytest.mark.filterwarnings("ignore:stability_margins:UserWarning")

H, K_DELAY, KI = 0.002, 500, 0.5


def integrator_with_delay(ki=KI):
    """I-only discrete control of a pure dead time of K_DELAY samples. The board reads its
    input just before it writes the period's command, so a plant output that follows the
    input without lag (this pure dead time) shows the command K + 1 samples later
    (bench/rigbench/rig/plants/tfplant.py reads the same left limit): L(z) = ki·h·z/(z − 1)·z^−(K+1)
    = ki·h/(z − 1)·z^−K."""
    return LoopController(0.0, ki, h_s=H), PlantModel([1.0], [1.0], K_DELAY * H)


def test_discrete_integrator_with_long_dead_time_is_exact():
    # Analytic: z − 1 = 2j·sin(ωh/2)·e^{jωh/2}, so |L| = ki·h/(2 sin(ωh/2)) and
    # arg L = −π/2 − ωh·(K + 1/2). Crossover sin(ωc·h/2) = ki·h/2; phase crossover
    # ω·h·(K + 1/2) = π/2; GM = 2 sin(ω180·h/2)/(ki·h); PM = 90° − ωc·h·(K + 1/2).
    ctrl, plant = integrator_with_delay()
    m = margins(ctrl, plant)
    lt = loop_transfer(ctrl, plant)
    assert lt.n_states + lt.delay_samples > EIG_MAX_STATES
    assert m.method.startswith("Nyquist") and m.stable
    wc = 2 / H * math.asin(KI * H / 2)
    w180 = math.pi / (2 * H * (K_DELAY + 0.5))
    gm = 2 * math.sin(w180 * H / 2) / (KI * H)
    pm = 90 - math.degrees(wc * H * (K_DELAY + 0.5))
    assert m.crossover_rad_s == pytest.approx(wc, rel=1e-9)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-9)
    assert m.delay_margin_s == pytest.approx(math.radians(pm) / wc, rel=1e-9)
    assert m.phase_crossover_rad_s == pytest.approx(w180, rel=1e-9)
    assert m.gain_margin_upper == pytest.approx(gm, rel=1e-9)
    # the Nyquist count agrees: stable just below the gain margin, unstable just above
    assert margins(*integrator_with_delay(KI * gm * 0.999)).stable
    assert not margins(*integrator_with_delay(KI * gm * 1.001)).stable


def test_long_dead_time_peak_sensitivity_matches_a_dense_python_control_sweep():
    ctrl, plant = integrator_with_delay()
    m = margins(ctrl, plant)
    loop = control.tf([KI * H], [1.0, -1.0] + [0.0] * K_DELAY, H)
    w = np.linspace(1e-3, math.pi / H, 400_000)
    ms_ref = float(np.max(1.0 / np.abs(1.0 + loop(np.exp(1j * w * H)))))
    assert m.ms == pytest.approx(ms_ref, rel=1e-4)


@pytest.mark.parametrize("factor", [0.5, 0.95, 1.05, 2.0])
def test_high_degree_discrete_stability_agrees_with_python_control_poles(factor):
    # 1/(s+1)^3 under a sampled PI with 130 samples of dead time: more states than
    # EIG_MAX_STATES, decided by the Nyquist count; the closed-loop poles from
    # python-control decide it independently.
    h, delay_n, kp, ki = 0.05, 130, 0.3, 0.15
    plant = PlantModel([1.0], [1.0, 3.0, 3.0, 1.0], delay_n * h)
    base = margins(LoopController(kp, ki, h_s=h), plant)
    assert base.method.startswith("Nyquist") and base.stable
    g = base.gain_margin_upper * factor
    m = margins(LoopController(kp * g, ki * g, h_s=h), plant)
    gd = control.sample_system(control.tf([1.0], [1.0, 3.0, 3.0, 1.0]), h, "zoh")
    c = control.tf([kp * g + ki * g * h, -kp * g], [1.0, -1.0], h)  # kp + ki·h·z/(z − 1)
    loop = c * gd * control.tf([1.0], [1.0] + [0.0] * delay_n, h)
    # closed-loop poles: roots of den + num of the loop python-control built
    poles = np.roots(np.polyadd(loop.den[0][0], loop.num[0][0]))
    assert m.stable == bool(np.all(np.abs(poles) < 1.0))
    assert m.stable == (factor < 1.0)


def test_continuous_pid_with_filter_and_dead_time_matches_pade_reference():
    # e^{-s}/(s+1) under a PID with a 2 ms derivative filter (|C| reaches kd/tf = 75 at
    # high frequency, so L spins around the origin for thousands of turns before it is
    # small) — compared with python-control on a 12th-order Padé approximation of the delay.
    kp, ki, kd, tf = 0.4, 0.8, 0.15, 0.002
    m = margins(LoopController(kp, ki, kd, tf), PlantModel([1.0], [1.0, 1.0], 1.0))
    c = control.tf([kp], [1.0]) + control.tf([ki], [1.0, 0.0]) + control.tf([kd, 0.0], [tf, 1.0])
    loop = c * control.tf([1.0], [1.0, 1.0]) * control.tf(*control.pade(1.0, 12))
    gm, pm, sm, wpc, wgc, _ = control.stability_margins(loop)
    assert m.stable and m.method.startswith("Nyquist")
    assert m.gain_margin_upper == pytest.approx(gm, rel=1e-4)
    assert m.phase_crossover_rad_s == pytest.approx(wpc, rel=1e-4)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-4)
    assert m.crossover_rad_s == pytest.approx(wgc, rel=1e-4)
    assert m.ms == pytest.approx(1 / sm, rel=1e-3)


def test_nearest_critical_gain_at_a_resonance_past_the_first_crossing():
    # A lightly damped mode (ζ = 0.01 at 50 rad/s) behind 0.1 s of dead time: the first
    # phase crossover (~15 rad/s) gives a critical gain of ~46, the resonance one of ~8.6,
    # which is the gain margin. Reference: all margins python-control finds on a
    # 14th-order Padé approximation of the delay.
    wn, zeta, tau = 50.0, 0.01, 0.1
    den = np.polymul([1.0, 2 * zeta * wn, wn * wn], [1.0, 1.0])
    m = margins(LoopController(0.3, 0.5), PlantModel([wn * wn], den, tau))
    loop = (control.tf([0.3, 0.5], [1.0, 0.0]) * control.tf([wn * wn], list(den))
            * control.tf(*control.pade(tau, 14)))
    gms, pms, _, wpcs, wgcs, _ = control.stability_margins(loop, returnall=True)
    i = int(np.argmin(gms))
    assert wpcs[i] > wpcs[0] * 3 and gms[i] < gms[0] / 4
    assert m.gain_margin_upper == pytest.approx(gms[i], rel=1e-6)
    assert m.phase_crossover_rad_s == pytest.approx(wpcs[i], rel=1e-6)
    assert m.phase_margin_deg == pytest.approx(pms[0], rel=1e-6)
    assert m.crossover_rad_s == pytest.approx(wgcs[0], rel=1e-6)
