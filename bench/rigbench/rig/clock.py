"""Clocks of the simulated board: wall time, or simulated time that runs as fast as the host
reads.

Both have ``now() -> float`` (seconds), ``sleep(dt)`` and ``virtual: bool``.

- ``RealClock`` (wall time) is ``rigbench.base.clock.RealClock``.
- ``VirtualClock``: ``now()`` is the simulated board's time. The simulation moves it with
  ``advance_to(t)``; ``sleep(dt)`` blocks until simulated time has moved on by ``dt``,
  woken through a ``threading.Condition``. So that a thread woken by a deadline (a
  heartbeat sender, say) gets to act before simulated time runs on, ``advance_to`` waits
  after waking sleepers until each has slept again or ``wake_grace_s`` of wall time has
  passed. A sleeper whose simulated time does not move for ``stall_guard_s`` wall seconds
  raises ``ClockStalled`` instead of hanging (nobody is reading the port, so nothing drives
  the simulation).
"""

from __future__ import annotations

import threading
import time

__all__ = ["VirtualClock", "ClockStalled"]


class ClockStalled(RuntimeError):
    """Simulated time stopped moving while a thread waited on it."""


class VirtualClock:
    """Simulated seconds, moved by the simulation (see the module docstring)."""

    virtual = True

    def __init__(self, start_s: float = 0.0, *, stall_guard_s: float = 5.0,
                 wake_grace_s: float = 0.05) -> None:
        self._now = float(start_s)
        self.stall_guard_s = stall_guard_s
        self.wake_grace_s = wake_grace_s
        self._cond = threading.Condition()
        self._sleepers: dict[int, float] = {}   # thread id -> simulated deadline
        self._awake: dict[int, float] = {}      # woken thread id -> wall time it may take
        self._earliest = float("inf")

    def now(self) -> float:
        return self._now

    def next_deadline(self) -> float | None:
        """The earliest simulated time a sleeper waits for, or None."""
        e = self._earliest
        return None if e == float("inf") else e

    def sleep(self, dt: float) -> None:
        """Block until simulated time has advanced by ``dt`` s. Raises ClockStalled."""
        me = threading.get_ident()
        with self._cond:
            self._awake.pop(me, None)
            self._cond.notify_all()                 # an advancer may wait for us
            deadline = self._now + max(float(dt), 0.0)
            if self._now >= deadline:
                return
            self._sleepers[me] = deadline
            self._earliest = min(self._sleepers.values())
            try:
                last, since = self._now, time.monotonic()
                while self._now < deadline:
                    self._cond.wait(min(0.25, self.stall_guard_s))
                    if self._now != last:
                        last, since = self._now, time.monotonic()
                    elif time.monotonic() - since > self.stall_guard_s:
                        raise ClockStalled(
                            f"simulated time stayed at {self._now:.6f} s for "
                            f"{self.stall_guard_s:g} s of wall time: nothing is reading the "
                            "simulated port, so nothing advances it")
            finally:
                del self._sleepers[me]
                self._earliest = min(self._sleepers.values(), default=float("inf"))
            self._awake[me] = time.monotonic() + self.wake_grace_s

    def advance_to(self, t: float) -> None:
        """Move simulated time to ``t`` (never backwards); wake sleepers that are due."""
        if t <= self._now:
            return
        if t < self._earliest and not self._awake:
            self._now = t                           # fast path: nobody to wake
            return
        me = threading.get_ident()
        with self._cond:
            self._now = t
            if self._earliest <= t:
                self._cond.notify_all()
            while True:
                wall = time.monotonic()
                due = [d for tid, d in self._sleepers.items() if d <= t and tid != me]
                for tid in [tid for tid, until in self._awake.items() if until <= wall]:
                    del self._awake[tid]
                pending = [u for tid, u in self._awake.items() if tid != me]
                if not due and not pending:
                    return
                wait = min(pending, default=wall + self.wake_grace_s) - wall
                self._cond.wait(max(min(wait, self.wake_grace_s), 0.001))
