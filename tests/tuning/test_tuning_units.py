"""Unit conversion at the board's edge."""

import math

import numpy as np
import pytest

from rigbench.base.units import UNITS, from_si, gain_from_si, gain_to_si, to_si


@pytest.mark.parametrize("unit, value, si", [
    ("deg", 180.0, math.pi), ("rad", 1.0, 1.0), ("deg/s", 90.0, math.pi / 2),
    ("rad/s", 2.0, 2.0), ("rev/s", 1.0, 2 * math.pi), ("rpm", 60.0, 2 * math.pi),
    ("N.m", 0.3, 0.3), ("mN.m", 300.0, 0.3), ("%", 50.0, 0.5), ("1", 7.0, 7.0),
    ("s", 2.0, 2.0), ("ms", 8.0, 0.008), ("Hz", 500.0, 500.0), ("V", 12.0, 12.0),
    ("A", 1.5, 1.5),
])
def test_to_and_from_si(unit, value, si):
    # definitions: 1 rev = 2π rad, 1 min = 60 s, 1° = π/180 rad (SI brochure, common practice)
    assert to_si(value, unit) == pytest.approx(si, rel=1e-15)
    assert from_si(si, unit) == pytest.approx(value, rel=1e-15)


def test_every_declared_unit_is_listed():
    assert set(UNITS) == {"deg", "rad", "deg/s", "rad/s", "rev/s", "rpm", "N.m", "mN.m", "%",
                          "1", "s", "ms", "Hz", "V", "A"}


def test_arrays_convert():
    assert np.allclose(to_si(np.array([0.0, 90.0]), "deg"), [0.0, math.pi / 2])


@pytest.mark.parametrize("bad", ["degrees", "Nm", "", None, "RPM"])
def test_unknown_unit_raises_naming_it(bad):
    with pytest.raises(ValueError, match="unknown unit"):
        to_si(1.0, bad)
    if bad:
        with pytest.raises(ValueError, match=repr(bad)):
            from_si(1.0, bad)


def test_pid_gain_conversion():
    # kp 0.64 (rev/s)/deg = 0.64·2π·180/π = 230.4 (rad/s)/rad; ki per second and per ms
    assert gain_to_si(0.64, "rev/s", "deg") == pytest.approx(230.4)
    assert gain_to_si(9.9, "rev/s", "deg", "1/s") == pytest.approx(9.9 * 360)
    assert gain_to_si(0.0099, "rev/s", "deg", "1/ms") == pytest.approx(9.9 * 360)
    assert gain_to_si(10.0, "rev/s", "deg", "ms") == pytest.approx(10.0 * 360 / 1000)
    assert gain_from_si(gain_to_si(1.7, "mN.m", "deg/s", "s"), "mN.m", "deg/s", "s") == \
        pytest.approx(1.7)
    with pytest.raises(ValueError, match="time part"):
        gain_to_si(1.0, "rev/s", "deg", "per second")
