"""Unit conversion between the units a board declares and SI inside Python.

A board declares a unit string for each parameter and telemetry signal (see the protocol's
discovery frames). Inside rigbench every quantity is SI (s, rad, rad/s, N·m, V, A; plain
ratios as fractions), so conversion happens once, at the edge, with these functions.

Known unit strings and their SI factor (value_si = value * factor):

    'deg' -> rad (pi/180)        'rad'   -> rad (1)
    'deg/s' -> rad/s (pi/180)    'rad/s' -> rad/s (1)
    'rev/s' -> rad/s (2 pi)      'rpm'   -> rad/s (2 pi/60)
    'N.m' -> N·m (1)             'mN.m'  -> N·m (1e-3)
    '%' -> fraction (0.01)       '1'     -> dimensionless (1)
    's' -> s (1)                 'ms'    -> s (1e-3)
    'Hz' -> 1/s (1)              'V' -> V (1)        'A' -> A (1)

Hertz stays a frequency in 1/s (it is not turned into rad/s). An unknown unit string raises
ValueError naming it: a silently assumed factor would put a wrong gain on a live rig.

PID gains in a board's units: kp in out/in, ki in out/(in·s), kd in out·s/in. The time part
is named by ``per`` in :func:`gain_to_si`: '1' (kp), '1/s' (ki), 's' (kd); '1/ms' and 'ms'
are accepted too for boards that count integral and derivative time in milliseconds.
"""

from __future__ import annotations

import math

__all__ = ["UNITS", "to_si", "from_si", "gain_to_si", "gain_from_si", "si_factor"]

UNITS: dict[str, float] = {
    "deg": math.pi / 180.0,
    "rad": 1.0,
    "deg/s": math.pi / 180.0,
    "rad/s": 1.0,
    "rev/s": 2.0 * math.pi,
    "rpm": 2.0 * math.pi / 60.0,
    "N.m": 1.0,
    "mN.m": 1e-3,
    "%": 0.01,
    "1": 1.0,
    "s": 1.0,
    "ms": 1e-3,
    "Hz": 1.0,
    "V": 1.0,
    "A": 1.0,
}

# Time factor of a gain's "per" part: the gain in SI is value * PER[per] * out/in factors.
# ki declared per millisecond of integration (out/(in·ms)) is 1000 times larger per second.
_PER: dict[str, float] = {
    "1": 1.0,
    "1/s": 1.0,
    "s": 1.0,
    "1/ms": 1e3,
    "ms": 1e-3,
}


def si_factor(unit: str) -> float:
    """Factor f with value_si = value * f for a declared unit string; ValueError if unknown."""
    try:
        return UNITS[unit]
    except (KeyError, TypeError):
        raise ValueError(
            f"unknown unit {unit!r}; known units: {', '.join(repr(u) for u in UNITS)}"
        ) from None


def to_si(value, unit: str):
    """Convert ``value`` (scalar or numpy array) from ``unit`` to SI."""
    return value * si_factor(unit)


def from_si(value, unit: str):
    """Convert ``value`` (scalar or numpy array) from SI to ``unit``."""
    return value / si_factor(unit)


def _gain_factor(out_unit: str, in_unit: str, per: str) -> float:
    try:
        per_factor = _PER[per]
    except (KeyError, TypeError):
        raise ValueError(
            f"unknown gain time part {per!r}; use one of {', '.join(repr(p) for p in _PER)}"
        ) from None
    return si_factor(out_unit) / si_factor(in_unit) * per_factor


def gain_to_si(value, out_unit: str, in_unit: str, per: str = "1"):
    """Convert a loop gain from the board's units to SI.

    ``out_unit`` is the unit of the controller output (e.g. 'rev/s' for a wheel-speed
    command), ``in_unit`` the unit of the measured input (e.g. 'deg' for tilt).
    ``per`` is '1' for kp (out/in), '1/s' for ki (out/(in·s)), 's' for kd (out·s/in);
    '1/ms' and 'ms' for boards that declare integral or derivative gains per millisecond.

    Example: kp = 0.64 (rev/s)/deg is 0.64 * 2π / (π/180) = 230.4 (rad/s)/rad.
    """
    return value * _gain_factor(out_unit, in_unit, per)


def gain_from_si(value, out_unit: str, in_unit: str, per: str = "1"):
    """Inverse of :func:`gain_to_si`: an SI gain expressed in the board's units."""
    return value / _gain_factor(out_unit, in_unit, per)
