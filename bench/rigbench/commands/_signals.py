"""SIGINT (Ctrl-C) and SIGTERM in commands that may move a motor: the kill byte goes out
first, from the signal handler, then the command unwinds (KeyboardInterrupt) through the
experiment's own clean-up. A software kill is not an emergency stop: the hardware cut-off
stays the real one.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager

from rigbench.link import LinkError

MOVING = ("armed", "running")


@contextmanager
def kill_on_signal(link, *, only_if_moving: bool = False) -> Iterator[None]:
    """Inside: SIGINT/SIGTERM send the kill bytes on ``link`` (when the motor is armed or
    running, or not known yet unless ``only_if_moving``), then raise KeyboardInterrupt."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        motor = link.motor_state
        if motor in MOVING or (motor is None and not only_if_moving):
            try:
                link.kill(reason="user")   # kill bytes ahead of anything queued
            except LinkError:
                pass   # the port is gone: the board's watchdog stops the motor
        raise KeyboardInterrupt

    previous = {s: signal.signal(s, handler) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, h in previous.items():
            signal.signal(s, h)
