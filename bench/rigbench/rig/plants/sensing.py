"""Sensor pieces shared by the simulated plants, and the board-side tilt filter.

- ``GaussianStream``: standard normal numbers drawn from a ``numpy.random.Generator`` in
  blocks and handed out one at a time as Python floats, so the plants' inner loops stay in
  plain ``math`` (a numpy call per scalar costs about a microsecond).
- ``Encoder``: an incremental encoder read once per loop period; wheel speed is the count
  difference over the period, so it is quantised to one count per period.
  ``check_counts_per_rev`` is its check of the count, for the plants' parameter sets too.
- ``ComplementaryFilter``: the tilt estimate a balance board computes from its
  accelerometer tilt and gyro rate. It belongs to the board's firmware (its state resets
  with the board and its time constant is a board setting), so the plants do not run it;
  the simulated firmware does.

Pure Python and numpy.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["ComplementaryFilter", "Encoder", "GaussianStream", "check_counts_per_rev"]


class GaussianStream:
    """Standard normal floats from ``rng``, drawn ``block`` at a time.

    The sequence depends only on the generator's seed, not on the block size's relation to
    the caller's use, so a plant seeded the same way always sees the same noise.
    """

    def __init__(self, rng: np.random.Generator, block: int = 4096) -> None:
        if not isinstance(rng, np.random.Generator):
            raise ValueError(f"rng must be a numpy.random.Generator, got {type(rng).__name__}")
        if block < 1:
            raise ValueError(f"block must be >= 1, got {block}")
        self._rng = rng
        self._block = int(block)
        self._buf: list[float] = []
        self._i = 0

    def next(self) -> float:
        """One standard normal number."""
        if self._i >= len(self._buf):
            self._buf = self._rng.standard_normal(self._block).tolist()
            self._i = 0
        x = self._buf[self._i]
        self._i += 1
        return x


def check_counts_per_rev(counts_per_rev: int) -> None:
    """An encoder's counts per revolution: a whole number >= 0 (0: no quantisation)."""
    if counts_per_rev < 0 or int(counts_per_rev) != counts_per_rev:
        raise ValueError(f"counts_per_rev must be a whole number >= 0, got {counts_per_rev}")


class Encoder:
    """Incremental encoder with ``counts_per_rev`` counts (edges) per revolution.

    ``read(angle_rad)`` latches the count for the true angle and returns the
    (angle from counts, speed from the count difference since the last read over
    ``period_s``). A 1024-line encoder read in quadrature has 4096 counts per revolution.
    ``counts_per_rev=0`` turns quantisation off (angle and speed are then exact
    differences).
    """

    def __init__(self, counts_per_rev: int, period_s: float) -> None:
        check_counts_per_rev(counts_per_rev)
        if not period_s > 0.0:
            raise ValueError(f"period_s must be > 0, got {period_s}")
        self.counts_per_rev = int(counts_per_rev)
        self.period_s = float(period_s)
        self._rad_per_count = 2.0 * math.pi / counts_per_rev if counts_per_rev else 0.0
        self._last = 0.0

    def _quantise(self, angle_rad: float) -> float:
        if self.counts_per_rev == 0:
            return angle_rad
        return math.floor(angle_rad / self._rad_per_count) * self._rad_per_count

    def reset(self, angle_rad: float = 0.0) -> None:
        """Latch ``angle_rad`` so the next speed reading starts from it."""
        self._last = self._quantise(angle_rad)

    def read(self, angle_rad: float) -> tuple[float, float]:
        """Return (measured angle in rad, measured speed in rad/s) and latch the count."""
        q = self._quantise(angle_rad)
        speed = (q - self._last) / self.period_s
        self._last = q
        return q, speed


class ComplementaryFilter:
    """Tilt estimate from accelerometer tilt and gyro rate, as a balance board computes it.

    ``tilt[k] = a·(tilt[k-1] + gyro·dt) + (1 - a)·accel_tilt`` with
    ``a = time_constant_s / (time_constant_s + dt_s)``: gyro above ~1/(2π·time_constant_s)
    Hz, accelerometer below. A gyro bias b leaves a steady tilt error of b·time_constant_s.
    """

    def __init__(self, time_constant_s: float = 0.5, dt_s: float = 0.002) -> None:
        if not time_constant_s > 0.0 or not math.isfinite(time_constant_s):
            raise ValueError(f"time_constant_s must be finite and > 0, got {time_constant_s}")
        if not dt_s > 0.0 or not math.isfinite(dt_s):
            raise ValueError(f"dt_s must be finite and > 0, got {dt_s}")
        self.time_constant_s = float(time_constant_s)
        self.dt_s = float(dt_s)
        self._a = time_constant_s / (time_constant_s + dt_s)
        self._tilt = 0.0
        self._started = False

    @property
    def tilt_rad(self) -> float:
        """The current estimate (rad)."""
        return self._tilt

    def reset(self, tilt_rad: float | None = None) -> None:
        """Start again; with ``None`` the first update takes its accelerometer tilt as is."""
        self._tilt = 0.0 if tilt_rad is None else float(tilt_rad)
        self._started = tilt_rad is not None

    def update(self, accel_tilt_rad: float, gyro_rad_s: float) -> float:
        """Fold in one sample and return the new estimate (rad)."""
        if not self._started:
            self._tilt = accel_tilt_rad
            self._started = True
            return self._tilt
        a = self._a
        self._tilt = a * (self._tilt + gyro_rad_s * self.dt_s) + (1.0 - a) * accel_tilt_rad
        return self._tilt
