"""Waiting in link time, and pacing a virtual clock by who waits.

Threads wait on the link (a reply, a sleep) with ``Waits.wait_until(predicate, deadline)``
where the deadline is link-clock time. The reader calls ``settle(now)`` after every read:
it retires the waits that are over and wakes the waiting threads.

With a **paced virtual clock** (the simulated board's ``clock=virtual``: time moves only
when the port is read) the reader reads only while there is demand: some thread waits on
the link, or sleeps on the port's own clock (``clock.next_deadline()``). So simulated time
passes only when the host asks for it and single-threaded runs are repeatable. After a
board restart, only the resync thread's waits count, so the re-handshake happens before
simulated time runs on for anyone else. With several threads waiting at once, how far time
runs before each gets scheduled is not repeatable.
"""

from __future__ import annotations

import threading
import time

from rigbench.link.errors import LinkTimeout


class _Waiter:
    __slots__ = ("predicate", "deadline", "done", "owner")

    def __init__(self, predicate, deadline: float) -> None:
        self.predicate, self.deadline, self.done = predicate, deadline, False
        self.owner = threading.get_ident()


class Waits:
    """The link's waiting room: one condition, the waiters, the demand for reading."""

    def __init__(self, clock, *, virtual: bool, paced: bool, reset_seen: threading.Event,
                 url: str = "", virtual_stall_s: float = 30.0) -> None:
        self.clock, self.virtual, self.paced = clock, virtual, paced
        self.reset_seen = reset_seen
        self.url = url
        self.virtual_stall_s = virtual_stall_s
        self.cond = threading.Condition()
        self.resync_ident: int | None = None  # thread that handshakes after a restart
        self._waiters: list[_Waiter] = []
        self._demand = threading.Event()

    def wait_until(self, predicate, deadline: float, check_usable) -> bool:
        """Wait until ``predicate()`` is true (True) or the link clock passes ``deadline``
        (False). ``predicate`` runs under ``cond``, also in the reader: keep it cheap and
        never send requests from it. ``check_usable()`` raises when the link is gone."""
        waiter = _Waiter(predicate, deadline)
        with self.cond:
            if predicate():
                return True
            self._waiters.append(waiter)
            self._update_demand()
            try:
                return self._wait_locked(waiter, check_usable)
            finally:
                if waiter in self._waiters:
                    self._waiters.remove(waiter)
                self._update_demand()

    def _wait_locked(self, waiter: _Waiter, check_usable) -> bool:
        last_t = stalled_since = None
        while True:
            if waiter.predicate():
                return True
            check_usable()
            now = self.clock.now()
            if waiter.done or now >= waiter.deadline:
                return False
            if self.virtual:
                if now != last_t:
                    last_t, stalled_since = now, time.monotonic()
                elif time.monotonic() - stalled_since > self.virtual_stall_s:
                    raise LinkTimeout(f"simulated clock of {self.url} stopped advancing")
                self.cond.wait(0.05)
            else:
                self.cond.wait(min(waiter.deadline - now, 0.05))

    def _update_demand(self) -> None:
        if self.reset_seen.is_set() and self.resync_ident is not None:
            demand = any(w.owner == self.resync_ident for w in self._waiters)
        else:
            demand = bool(self._waiters)
        if demand:
            self._demand.set()
        else:
            self._demand.clear()

    def update_demand(self) -> None:
        with self.cond:
            self._update_demand()

    def _clock_demand(self) -> bool:
        next_deadline = getattr(self.clock, "next_deadline", None)
        if next_deadline is None or self.reset_seen.is_set():
            return False
        return next_deadline() is not None

    def idle(self) -> bool:
        """Reader side, paced clock only: True (after a short pause) when nobody needs time
        to move, so the reader should not read now."""
        if not self.paced or self._demand.is_set() or self._clock_demand():
            return False
        self._demand.wait(0.01)
        return True

    def settle(self, now: float) -> None:
        """Reader side: retire finished waits (so a paced clock stops at once instead of
        running on until the waiting thread is scheduled) and wake every waiter."""
        with self.cond:
            for w in list(self._waiters):
                if w.predicate() or now >= w.deadline:
                    w.done = True
                    self._waiters.remove(w)
            self._update_demand()
            self.cond.notify_all()

    def wake_all(self) -> None:
        with self.cond:
            self.cond.notify_all()
