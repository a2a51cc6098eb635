"""The link's clock: where every link timing (heartbeat, reply timeouts, staleness, rates)
is measured.

A port may bring its own clock (the simulated board's ``port.clock``; in virtual-clock mode
its time advances only as the host reads). Any object with ``now() -> float`` (seconds) and
``sleep(dt)`` counts as a clock; ``virtual`` (default False) says that its time is not wall
time, so waits must be woken by the reader rather than by real-time timeouts.
"""

from __future__ import annotations

from rigbench.base.clock import RealClock


def is_clock(obj) -> bool:
    return callable(getattr(obj, "now", None)) and callable(getattr(obj, "sleep", None))


def clock_of(port) -> "RealClock":
    """The port's own clock when it has one, else a real monotonic clock."""
    clock = getattr(port, "clock", None)
    return clock if is_clock(clock) else RealClock()


def is_virtual(clock) -> bool:
    return bool(getattr(clock, "virtual", False))
