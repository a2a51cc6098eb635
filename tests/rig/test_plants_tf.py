"""TransferFunctionPlant against python-control, scipy.signal and closed-form responses."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
import scipy.signal

from rigbench.rig.plants.catalog import Plant, TransferFunctionPlant, make_plant


def run_plant(plant: TransferFunctionPlant, u: np.ndarray) -> np.ndarray:
    """y after each step (the value at t = (k+1)·dt for input u[k])."""
    out = np.empty(len(u))
    for k, uk in enumerate(u):
        plant.step(float(uk))
        out[k] = plant.truth()["y"]
    return out


def continuous_step(num, den, delay_s: float, t: np.ndarray, grid_s: float) -> np.ndarray:
    """Step response of e^{-s·delay}·num/den at times t, from python-control's
    `step_response` on the rational part over a uniform grid from 0 (spacing ``grid_s``,
    which must divide both the delay and the sample times), shifted by the exact delay (no
    Padé). Zero up to and including t = delay (the left limit)."""
    j = np.rint((t - delay_s) / grid_s).astype(int)
    assert np.allclose(j * grid_s + delay_s, t, atol=1e-9 * grid_s + 1e-12)
    y = np.zeros_like(t)
    late = j > 0
    if np.any(late):
        grid = grid_s * np.arange(j.max() + 1)
        r = control.step_response(control.tf(num, den), grid)
        y[late] = np.asarray(r.outputs)[j[late]]
    return y


# ----------------------------------------------------------------- step responses

@pytest.mark.parametrize("num,den,delay_s,dt_s,grid_s,analytic", [
    # 1/(s+1)^3: 1 − e^{−t}(1 + t + t²/2)
    ([1.0], [1.0, 3.0, 3.0, 1.0], 0.0, 0.01, 0.01,
     lambda t: 1 - np.exp(-t) * (1 + t + t * t / 2)),
    # e^{−s}/(s+1): whole-sample delay (100 samples)
    ([1.0], [1.0, 1.0], 1.0, 0.01, 0.01, lambda t: 1 - np.exp(-t)),
    # e^{−0.5s}/(s+1)^2 at 5 Hz: 2.5 samples, a fractional delay
    ([1.0], [1.0, 2.0, 1.0], 0.5, 0.2, 0.1, lambda t: 1 - np.exp(-t) * (1 + t)),
    # e^{−0.5s}/(s+1)^2 at 500 Hz with 0.5031 s: 251.55 samples
    ([1.0], [1.0, 2.0, 1.0], 0.5031, 0.002, 0.0001, lambda t: 1 - np.exp(-t) * (1 + t)),
    # direct feed-through: (s+2)/(s+1) = 2 − e^{−t}, with a fractional delay of 0.37 samples
    ([1.0, 2.0], [1.0, 1.0], 0.037, 0.1, 0.001, lambda t: 2 - np.exp(-t)),
])
def test_step_response_matches_continuous_step_at_samples(num, den, delay_s, dt_s, grid_s,
                                                         analytic):
    # A step is held exactly by a zero-order hold, so the sampled plant's step response must
    # equal the continuous one at the sample instants (step invariance of ZOH sampling:
    # Åström & Wittenmark (1997), Computer-Controlled Systems, ch. 2). References: the
    # closed-form responses (inverse Laplace transforms, textbook tables) and python-control
    # `step_response` on `control.tf` shifted by the exact delay.
    n = int(round(12.0 / dt_s))
    plant = TransferFunctionPlant(num, den, delay_s, dt_s)
    y = run_plant(plant, np.ones(n))
    t = dt_s * np.arange(1, n + 1)
    tl = np.maximum(t - delay_s, 0.0)
    # the output read after a step is the left limit, so at t = delay exactly it is still 0
    want = np.where(t > delay_s + 1e-12, analytic(tl), 0.0)
    assert np.max(np.abs(y - want)) < 1e-10
    ref_ct = continuous_step(num, den, delay_s, t, grid_s)
    assert np.max(np.abs(y - ref_ct)) < 1e-9


@pytest.mark.parametrize("num,den,delay_s,dt_s", [
    ([1.0], [1.0, 3.0, 3.0, 1.0], 0.0, 0.05),
    ([1.0], [1.0, 1.0], 1.0, 0.01),
    ([2.0, 1.0], [1.0, 0.8, 4.0], 0.3, 0.1),
])
def test_matches_python_control_c2d_with_whole_sample_delay(num, den, delay_s, dt_s):
    # python-control: `c2d(tf, dt, 'zoh')` times z^{-d} is the exact sampled plant when the
    # delay is d whole samples; any input sequence must give the same output.
    d = int(round(delay_s / dt_s))
    sysd = control.c2d(control.tf(num, den), dt_s, "zoh") * control.tf([1.0], [1.0] + [0.0] * d,
                                                                       dt_s)
    rng = np.random.default_rng(3)
    u = rng.standard_normal(400)
    r = control.forced_response(sysd, np.arange(401) * dt_s, np.append(u, 0.0))
    y = run_plant(TransferFunctionPlant(num, den, delay_s, dt_s), u)
    # forced_response gives y[k] from u[0..k]; the plant's output after step k is the
    # left limit at (k+1)·dt, which for a strictly proper part is python-control's y[k+1]
    assert np.max(np.abs(y - np.asarray(r.outputs)[1:])) < 1e-9


def test_scipy_step_agrees_for_third_order_lag():
    # scipy.signal.step on the continuous 1/(s+1)^3, an outside integrator.
    dt = 0.02
    t = dt * np.arange(1, 501)
    _, ref = scipy.signal.step(([1.0], [1.0, 3.0, 3.0, 1.0]), T=np.concatenate(([0.0], t)))
    y = run_plant(TransferFunctionPlant([1.0], [1.0, 3.0, 3.0, 1.0], 0.0, dt), np.ones(500))
    assert np.max(np.abs(y - ref[1:])) < 1e-9


# ----------------------------------------------------------------- frequency response

def sampled_frequency_response(num, den, delay_s, dt_s, grid_s, w_rad_s, horizon_s=60.0):
    """H(e^{jωT}) of the ZOH-sampled plant from its pulse response h[n] = s(nT) − s((n−1)T),
    s the continuous step response (python-control, exact delay)."""
    t = dt_s * np.arange(0, int(horizon_s / dt_s) + 1)
    s = continuous_step(num, den, delay_s, t, grid_s)
    h = np.diff(s)                        # h[n] for n = 1 … N
    n = np.arange(1, len(s))
    return np.sum(h * np.exp(-1j * w_rad_s * dt_s * n))


@pytest.mark.parametrize("num,den,delay_s,dt_s,grid_s,per_period", [
    ([1.0], [1.0, 3.0, 3.0, 1.0], 0.0, 0.05, 0.05, 40),
    ([1.0], [1.0, 1.0], 1.0, 0.05, 0.05, 24),
    ([1.0], [1.0, 2.0, 1.0], 0.5, 0.2, 0.1, 20),     # 2.5-sample delay
    ([1.0], [1.0, 2.0, 1.0], 0.5, 0.2, 0.1, 7),
    ([1.0], [1.0, 1.0], 0.237, 0.05, 0.001, 9),      # 4.74-sample delay
])
def test_sinusoid_steady_state_matches_sampled_frequency_response(num, den, delay_s, dt_s,
                                                                  grid_s, per_period):
    # Reference: the pulse-response sum of the ZOH-sampled plant built from python-control's
    # continuous step response with the exact e^{-sL} shift (step invariance, Åström &
    # Wittenmark (1997), ch. 2); for whole-sample delays also python-control's c2d evaluated
    # at z = e^{jωT}. The plant is driven by a sampled sinusoid and its steady state fitted.
    w = 2 * math.pi / (per_period * dt_s)
    n = per_period * int(math.ceil(50.0 / (per_period * dt_s)))
    k = np.arange(n)
    u = np.sin(w * dt_s * k)
    y = run_plant(TransferFunctionPlant(num, den, delay_s, dt_s), u)
    last = slice(n - 4 * per_period, n)
    # y after step k belongs to t = (k+1)·dt: fit y = Re(H·e^{jω(k+1)T}/j)
    kk = k[last] + 1
    basis = np.column_stack([np.sin(w * dt_s * kk), np.cos(w * dt_s * kk)])
    (a, b), *_ = np.linalg.lstsq(basis, y[last], rcond=None)
    # sin(x + φ)·|H| = |H|cosφ·sin x + |H|sinφ·cos x, so H = a + j·b
    h_meas = complex(a, b)
    h_ref = sampled_frequency_response(num, den, delay_s, dt_s, grid_s, w)
    assert abs(h_meas - h_ref) < 1e-6 * max(1.0, abs(h_ref))
    if abs(delay_s / dt_s - round(delay_s / dt_s)) < 1e-9:
        d = int(round(delay_s / dt_s))
        sysd = control.c2d(control.tf(num, den), dt_s, "zoh")
        z = np.exp(1j * w * dt_s)
        h_ctrl = complex(sysd(z)) * z ** (-d)
        assert abs(h_meas - h_ctrl) < 1e-9 * max(1.0, abs(h_ctrl))


# ----------------------------------------------------------------- the rest of the contract

def test_static_gain_with_whole_sample_delay():
    # Pure gain 3·e^{−0.01s} at 500 Hz is 5 samples of delay (closed form: a shifted step,
    # common practice, no source).
    p = make_plant([3.0], [1.0], 0.01, np.random.default_rng(7), noise=0.0, rate_hz=500)
    assert p.delay_samples == 5 and p.delay_fraction_s == 0.0
    y = run_plant(p, np.ones(10))
    # read after step k is the left limit at (k+1)·dt: the input of step 0 shows after step 5
    assert list(y) == [0.0] * 5 + [3.0] * 5


def test_measurement_noise_level_and_determinism():
    # Noise RMS is noise·measurement_noise_std by construction; sample RMS of 4000 normal
    # draws lies within ±5% with probability > 0.99 (chi-square, common practice, no source).
    def noisy(seed):
        p = make_plant([1.0], [1.0, 1.0], 0.0, np.random.default_rng(seed), noise=2.0,
                       measurement_noise_std=1e-3)
        out = []
        for _ in range(4000):
            p.step(1.0)
            out.append(p.sensors()["y"] - p.truth()["y"])
        return np.array(out)

    a, b, c = noisy(11), noisy(11), noisy(12)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)
    assert 0.95 * 2e-3 < np.sqrt(np.mean(a * a)) < 1.05 * 2e-3


def test_reset_and_protocol():
    p = make_plant([1.0], [1.0, 1.0], 0.013, noise=0.0, rate_hz=100)
    assert isinstance(p, Plant)
    first = run_plant(p, np.ones(50))
    p.reset()
    assert p.truth()["y"] == 0.0
    assert np.array_equal(run_plant(p, np.ones(50)), first)


@pytest.mark.parametrize("kwargs,match", [
    (dict(num=[1, 0, 0], den=[1, 1]), "improper"),
    (dict(num=[1], den=[0, 0]), "all zeros"),
    (dict(num=[], den=[1, 1]), "non-empty"),
    (dict(num=[1], den=[1, float("nan")]), "non-finite"),
    (dict(num=["a"], den=[1, 1]), "numbers"),
    (dict(num=[[1, 2]], den=[1, 1]), "1-D"),
    (dict(num=[1], den=[1, 1], delay_s=-0.1), "delay_s"),
    (dict(num=[1], den=[1, 1], dt_s=0.0), "dt_s"),
    (dict(num=[1], den=[1, 1], noise=1.0), "rng"),
    (dict(num=[1], den=[1, 1], input_limits=(1.0, -1.0)), "input_limits"),
])
def test_rejects_bad_construction(kwargs, match):
    with pytest.raises(ValueError, match=match):
        TransferFunctionPlant(**kwargs)


def test_leading_zeros_are_not_improper_and_commands_are_checked():
    # 0·s² + 1 over s + 1 is the proper 1/(s+1) (common practice, no source).
    p = TransferFunctionPlant([0.0, 0.0, 1.0], [1.0, 1.0], 0.0, 0.1,
                              input_limits=(-0.5, 0.5))
    assert p.num == (1.0,)
    p.step(2.0)                           # clipped to 0.5
    assert p.truth()["u"] == 0.5
    assert p.truth()["y"] == pytest.approx(0.5 * (1 - math.exp(-0.1)), rel=1e-12)
    with pytest.raises(ValueError, match="finite"):
        p.step(float("inf"))
    with pytest.raises(ValueError, match="finite"):
        p.step("1.0")                     # type: ignore[arg-type]
