"""pyserial URL handler ``sim://``: a simulated board behind ``serial.serial_for_url``.

``bench/rigbench/__init__`` appends ``rigbench.handlers`` to ``serial.protocol_handler_packages``, so
``serial.serial_for_url('sim://balance?clock=virtual')`` returns this ``Serial``. URL
options: ``rigbench.rig.url``. Extra attributes: ``clock`` (``RealClock`` or
``VirtualClock``), ``board`` (the ``SimBoard``), ``link`` (the ``SimLink`` with the fault
counters).

- ``clock=real``: a background thread steps the board paced to wall time, a few loop
  periods at a time, and moves its output into a 64 kB receive buffer; when that is full
  the board's own transmit buffer fills and the board drops telemetry, as a real one does.
  ``read`` follows pyserial: it returns when ``size`` bytes are there or the timeout ends.
- ``clock=virtual``: simulated time moves only as the host reads. ``read(size)`` steps the
  board until it has output (or 20 ms of simulated time passed with nothing, or the
  timeout, counted in simulated seconds, ran out), then returns what is there, up to
  ``size`` bytes: it may return fewer bytes than asked before the timeout ends, like a
  real port read with ``read(in_waiting or 1)``. Nothing is ever dropped. ``write`` feeds
  the board at once (the kill byte acts before the next loop period).
- Unplug (``unplug=`` fault): ``read`` and ``write`` raise ``SerialException``,
  ``in_waiting`` raises ``OSError`` (EIO), as a vanished USB device does on Linux.

Line settings, modem lines and the output side come from ``rigbench.handlers.board_port``.
"""

from __future__ import annotations

import errno
import threading
import time

from serial.serialutil import SerialException

from rigbench.base.clock import RealClock
from rigbench.rig.clock import VirtualClock
from rigbench.rig.simlink import SimLink
from rigbench.rig.url import parse_sim_url

from rigbench.handlers.board_port import BoardPort

__all__ = ["Serial"]

RX_BUFFER_BYTES = 65536
VIRTUAL_IDLE_S = 0.02      # simulated time a virtual read waits for output
REAL_BATCH_S = 0.002       # how often the real-time stepper wakes
REAL_MAX_LAG_S = 0.25      # beyond this the stepper skips instead of catching up


class Serial(BoardPort):
    """A simulated board as a serial port (see the module docstring)."""

    def __init__(self, *args, **kwargs) -> None:
        self.link: SimLink | None = None
        self.clock = None
        self._buf = bytearray()
        self._lock = threading.RLock()
        self._cond = threading.Condition(self._lock)
        self._thread: threading.Thread | None = None
        self._stop = False
        self._cancel = False
        self.late_steps = 0
        super().__init__(*args, **kwargs)

    @property
    def board(self):
        return None if self.link is None else self.link.board

    # ------------------------------------------------------------------ open / close

    def open(self) -> None:
        self._check_can_open()
        try:
            options = parse_sim_url(self._port)
            self.link = SimLink(options)
        except ValueError as exc:
            raise SerialException(f"could not open {self._port}: {exc}") from None
        self._buf = bytearray()
        self._stop = False
        if options.clock == "virtual":
            self.clock = VirtualClock()
        else:
            self.clock = RealClock()
            self._thread = threading.Thread(target=self._run_real, name="sim-board",
                                            daemon=True)
        self.is_open = True
        if self._thread is not None:
            self._thread.start()

    def close(self) -> None:
        self._stop = True
        with self._cond:
            self._cond.notify_all()
        if self._thread is not None and self._thread is not threading.current_thread():
            self._thread.join(timeout=2.0)
        self._thread = None
        self.is_open = False

    def from_url(self, url: str) -> str:
        parse_sim_url(url)
        return url

    # ------------------------------------------------------------------ real clock

    def _run_real(self) -> None:
        link = self.link
        period = link.board.dt_s
        t0 = time.monotonic()
        done = 0
        while not self._stop:
            target = int((time.monotonic() - t0) / period)
            behind = target - done
            if behind * period > REAL_MAX_LAG_S:        # the machine was busy: skip ahead
                skip = behind - int(REAL_MAX_LAG_S / period)
                self.late_steps += skip
                done += skip
                behind -= skip
            if behind > 0:
                with self._cond:
                    for _ in range(behind):
                        link.advance()
                        room = RX_BUFFER_BYTES - len(self._buf)
                        if room > 0:
                            self._buf += link.drain(room)
                    done += behind
                    self._cond.notify_all()
                if link.unplugged:
                    with self._cond:
                        self._cond.notify_all()
                    return
            time.sleep(REAL_BATCH_S)

    # ------------------------------------------------------------------ virtual clock

    def _step_virtual(self, limit_s: float) -> None:
        """Step until output is buffered or ``limit_s`` simulated seconds passed."""
        link = self.link
        clock = self.clock
        with self._lock:
            self._buf += link.drain()
        t_end = link.time_s + max(limit_s, link.board.dt_s)
        while not self._buf and not link.unplugged and not self._cancel:
            with self._lock:
                link.advance()
                self._buf += link.drain()
            clock.advance_to(link.time_s)           # outside the lock: woken threads write
            if link.time_s >= t_end - 1e-12:
                break
        self._cancel = False

    # ------------------------------------------------------------------ pyserial API

    def _check_plug(self) -> None:
        self._check_open()
        if self.link.unplugged:
            raise SerialException("device reports readiness to read but returned no data "
                                  "(device disconnected or multiple access on port?)")

    @property
    def in_waiting(self) -> int:
        self._check_open()
        if self.link.unplugged:
            raise OSError(errno.EIO, "Input/output error")
        if self.clock.virtual and not self._buf:
            self._step_virtual(VIRTUAL_IDLE_S)
        return len(self._buf)

    def read(self, size: int = 1) -> bytes:
        self._check_plug()
        if size <= 0:
            return b""
        if self.clock.virtual:
            if not self._buf:
                limit = VIRTUAL_IDLE_S if self._timeout is None else min(self._timeout,
                                                                         VIRTUAL_IDLE_S)
                self._step_virtual(limit)
                self._check_plug()
            with self._lock:
                data = bytes(self._buf[:size])
                del self._buf[:size]
            return data
        deadline = None if self._timeout is None else time.monotonic() + self._timeout
        with self._cond:
            while len(self._buf) < size and not self._cancel and self.is_open:
                self._check_plug()
                if deadline is None:
                    self._cond.wait(0.1)
                else:
                    left = deadline - time.monotonic()
                    if left <= 0:
                        break
                    self._cond.wait(left)
            self._cancel = False
            data = bytes(self._buf[:size])
            del self._buf[:size]
        if not data:
            self._check_plug()
        return data

    def write(self, data) -> int:
        self._check_open()
        if self.link.unplugged:
            raise SerialException(f"write failed: [Errno {errno.EIO}] Input/output error")
        data = bytes(data)
        with self._lock:
            self.link.write(data)
        return len(data)

    def reset_input_buffer(self) -> None:
        self._check_open()
        with self._lock:
            self._buf.clear()

    def cancel_read(self) -> None:
        self._cancel = True
        with self._cond:
            self._cond.notify_all()
