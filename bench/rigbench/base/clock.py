"""The wall clock: monotonic seconds, for the link and the simulated board alike.

A clock is any object with ``now() -> float`` (seconds), ``sleep(dt)`` (seconds) and
``virtual: bool`` (True when its time is not wall time). This is the real one; the
simulated board's ``VirtualClock`` lives in ``rigbench.rig.clock``.
"""

from __future__ import annotations

import time

__all__ = ["RealClock"]


class RealClock:
    """Monotonic wall-clock seconds (``time.monotonic``, ``time.sleep``)."""

    virtual = False

    @staticmethod
    def now() -> float:
        return time.monotonic()

    @staticmethod
    def sleep(dt: float) -> None:
        if dt > 0:
            time.sleep(dt)
