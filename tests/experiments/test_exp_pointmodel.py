"""Low-order models fitted to two exact frequency-response points (and a static gain)."""

import math

import control
import numpy as np
import pytest

from rigbench.experiments.pointmodel import fit_process_model
from rigbench.tuning.point import FrequencyPoint


def _points(num, den, delay, omegas):
    # reference G(jω) from python-control, dead time as e^{-jωL}
    g = control.tf(num, den)
    out = []
    for w in omegas:
        v = complex(g(1j * w)) * np.exp(-1j * w * delay)
        out.append(FrequencyPoint.from_complex(v, w))
    return out


@pytest.mark.parametrize("num,den,delay,order,k,t,w", [
    ([1.0], [1.0, 3.0, 3.0, 1.0], 0.0, 3, 1.0, 1.0, 1.7321),     # docs/METHODS.md §3 plants
    ([1.0], [1.0, 1.0], 1.0, 1, 1.0, 1.0, 2.0288),
    ([1.0], [1.0, 2.0, 1.0], 0.5, 2, 1.0, 1.0, 1.9204),
    ([2.0], [3.0, 1.0], 0.4, 1, 2.0, 3.0, 1.3),
])
def test_fit_recovers_plant_from_points_at_w_and_3w(num, den, delay, order, k, t, w):
    # points computed with python-control at ω and 3ω, ω near the ultimate frequency
    # (docs/METHODS.md §3 table [calc]); a plant of the model's own form must come back exactly
    pts = _points(num, den, delay, [w, 3 * w])
    m = fit_process_model(pts)
    assert m.order == order
    assert m.gain == pytest.approx(k, rel=1e-3)
    assert m.time_constant_s == pytest.approx(t, rel=1e-3)
    assert m.delay_s == pytest.approx(delay, abs=1e-3)
    assert m.fit_rms < 1e-3


def test_static_gain_fixes_k_and_sign_follows_the_point():
    # a negative-gain plant: G = −2/(s+1)^2 (python-control); its relay point sits near 0°
    pts = _points([-2.0], [1.0, 2.0, 1.0], 0.3, [1.5, 4.5])
    m = fit_process_model(pts, static_gain=-2.0)
    assert m.gain == pytest.approx(-2.0)
    assert m.static_gain_used
    w = np.array([0.5, 1.5, 4.5])
    ref = np.array([complex(control.tf([-2.0], [1.0, 2.0, 1.0])(1j * x)) for x in w]) \
        * np.exp(-1j * w * 0.3)
    assert np.allclose(m.response(w), ref, rtol=1e-3, atol=1e-6)


def test_integrating_model():
    # G = 0.5·e^{-0.2s}/(s(0.4s+1)), python-control reference
    pts = _points([0.5], [0.4, 1.0, 0.0], 0.2, [2.0, 6.0])
    m = fit_process_model(pts, kind="integrating")
    assert (m.order, m.gain, m.time_constant_s, m.delay_s) == pytest.approx(
        (1, 0.5, 0.4, 0.2), rel=1e-3, abs=1e-4)


def test_unknown_kind_and_empty_points_raise():
    with pytest.raises(ValueError):
        fit_process_model([], kind="lag")
    with pytest.raises(ValueError):
        fit_process_model(_points([1.0], [1.0, 1.0], 0.0, [1.0]), kind="quadratic")
    assert math.isfinite(fit_process_model(_points([1.0], [1.0, 1.0], 0.5, [2.0, 6.0])).gain)
