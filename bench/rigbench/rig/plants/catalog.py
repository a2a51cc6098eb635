"""Plants of the simulated boards: the common interface and one constructor per rig.

- ``make_balance``: the reaction-wheel balance rig (``rigbench.rig.plants.balance``).
- ``make_wheel``: a motor and flywheel speed plant (``rigbench.rig.plants.wheel``).
- ``make_plant``: any proper transfer function with dead time (``rigbench.rig.plants.tfplant``).

Every plant steps with a fixed ``dt_s`` (the board's loop period, ``1/rate_hz``), holding
the command over the step; all quantities are SI. Noise comes from the ``rng`` handed in,
so a plant is deterministic for a given seed; ``noise`` scales it (1.0 nominal, 0 none).

Pure Python, numpy and scipy.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Protocol, runtime_checkable

import numpy as np

from rigbench.rig.plants.balance import DRIVES, BalanceParams, BalanceRig
from rigbench.rig.plants.sensing import ComplementaryFilter
from rigbench.rig.plants.tfplant import TransferFunctionPlant
from rigbench.rig.plants.wheel import WheelParams, WheelRig

__all__ = [
    "BalanceParams", "BalanceRig", "ComplementaryFilter", "Plant", "TransferFunctionPlant",
    "WheelParams", "WheelRig", "make_balance", "make_plant", "make_wheel",
]


@runtime_checkable
class Plant(Protocol):
    """What the simulated board's firmware needs from a plant."""

    dt_s: float
    input_limits: tuple[float, float]

    def step(self, command: float) -> None:
        """Hold ``command`` (SI units of the actuator input) for ``dt_s`` and advance."""

    def sensors(self) -> dict[str, float]:
        """What a board would measure, SI units, with noise and quantisation."""

    def truth(self) -> dict[str, float]:
        """The true state, SI units, no noise."""

    def reset(self) -> None:
        """Back to the initial state."""


def _period_s(rate_hz: float) -> float:
    if not (isinstance(rate_hz, (int, float)) and math.isfinite(rate_hz) and rate_hz > 0):
        raise ValueError(f"rate_hz must be finite and > 0, got {rate_hz!r}")
    return 1.0 / float(rate_hz)


def make_balance(drive: str = "speed", rng: np.random.Generator | None = None,
                 noise: float = 1.0, rate_hz: float = 500.0, *,
                 params: BalanceParams | None = None) -> BalanceRig:
    """The demo balance rig (or ``params``), ``drive`` 'speed' or 'torque', stepped at
    ``rate_hz``. ``rng`` defaults to ``numpy.random.default_rng(0)``."""
    if drive not in DRIVES:
        raise ValueError(f"drive must be one of {DRIVES}, got {drive!r}")
    return BalanceRig(params, drive=drive, rng=np.random.default_rng(0) if rng is None else rng,
                      noise=noise, dt_s=_period_s(rate_hz))


def make_wheel(rng: np.random.Generator | None = None, noise: float = 1.0,
               rate_hz: float = 500.0, *, params: WheelParams | None = None) -> WheelRig:
    """The demo motor and flywheel (or ``params``), command in volts, stepped at
    ``rate_hz``. ``rng`` defaults to ``numpy.random.default_rng(0)``."""
    return WheelRig(params, rng=np.random.default_rng(0) if rng is None else rng,
                    noise=noise, dt_s=_period_s(rate_hz))


def make_plant(num: Sequence[float], den: Sequence[float], delay_s: float = 0.0,
               rng: np.random.Generator | None = None, noise: float = 1.0,
               rate_hz: float = 500.0, *,
               measurement_noise_std: float = 1e-3) -> TransferFunctionPlant:
    """``e^{-s·delay_s}·num(s)/den(s)`` stepped at ``rate_hz``; measurement noise of
    ``noise·measurement_noise_std`` RMS on y. ``rng`` defaults to
    ``numpy.random.default_rng(0)``."""
    return TransferFunctionPlant(num, den, delay_s, _period_s(rate_hz),
                                 rng=np.random.default_rng(0) if rng is None else rng,
                                 noise=noise, measurement_noise_std=measurement_noise_std)
