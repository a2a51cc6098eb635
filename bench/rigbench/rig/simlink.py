"""A simulated board behind a simulated cable: the board, its fault timeline and a noisy
line, with no threads and no clock of its own (the ``sim://`` port and the pty server
drive it).

Faults (from ``SimOptions``; times are the board's simulated seconds since it was made):
- ``corrupt``/``drop``: each byte, in each direction, is flipped in one random bit or
  lost with that probability. A flip never makes the kill byte 0x18: a noisy-line test
  exercises framing and retries, not spurious stops.
- ``stall``: from ``stall_after_s`` for ``stall_for_s`` the firmware does not run (the
  plant does, with the last command held); host bytes wait in a 4 kB receive FIFO (excess
  lost) and are read after the first loop period once the firmware runs again (so a stall
  longer than the watchdog timeout trips it, as a timer-driven loop would). Bytes written
  while the FIFO still holds older ones join it behind them: a UART's receive buffer keeps
  order.
- ``reset``: at ``reset_after_s`` the board reboots (``ev boot reason=reset``).
- ``unplug``: at ``unplug_after_s`` the cable is gone: ``unplugged`` becomes True and the
  board stops.

Deterministic: the plant's noise comes from ``seed``, the line's faults from a separate
stream derived from the same seed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigbench.rig.firmware.board import SimBoard, make_board
from rigbench.rig.url import SimOptions
from rigbench.wire.frame import KILL_BYTE

__all__ = ["SimLink", "LineCounts"]

RX_FIFO_BYTES = 4096


@dataclass
class LineCounts:
    """What the simulated line did to the bytes (both directions)."""

    corrupted: int = 0
    dropped: int = 0
    fifo_lost: int = 0


class _NoisyLine:
    def __init__(self, corrupt: float, drop: float, rng: np.random.Generator,
                 counts: LineCounts) -> None:
        self.corrupt = corrupt
        self.drop = drop
        self.rng = rng
        self.counts = counts

    def carry(self, data: bytes) -> bytes:
        if not data or (self.corrupt == 0.0 and self.drop == 0.0):
            return data
        n = len(data)
        u = self.rng.random((2, n))
        hit = np.flatnonzero((u[0] < self.corrupt) | (u[1] < self.drop))
        if hit.size == 0:
            return data
        out = bytearray(data)
        lost = []
        bits = self.rng.integers(0, 8, size=hit.size)
        for i, bit in zip(hit.tolist(), bits.tolist()):
            if u[1, i] < self.drop:
                lost.append(i)
                continue
            b = out[i] ^ (1 << bit)
            if b == KILL_BYTE:
                b = out[i] ^ (1 << ((bit + 1) % 8))
            out[i] = b
            self.counts.corrupted += 1
        for i in reversed(lost):
            del out[i]
        self.counts.dropped += len(lost)
        return bytes(out)


class SimLink:
    """Board + faults. ``write`` host bytes, ``advance`` the board, ``drain`` its output."""

    def __init__(self, options: SimOptions, *, board: SimBoard | None = None,
                 **board_kw) -> None:
        self.options = options
        if board is None:
            if options.plant_kind is not None:
                board_kw["plant_kind"] = options.plant_kind
            board = make_board(options.rig, drive=options.drive, num=options.num,
                               den=options.den, delay_s=options.delay_s, seed=options.seed,
                               noise=options.noise, rate_hz=options.rate_hz,
                               state_path=options.state_path, **board_kw)
        self.board = board
        self.counts = LineCounts()
        rng = np.random.default_rng(np.random.SeedSequence(options.seed).spawn(1)[0])
        self._line = _NoisyLine(options.corrupt, options.drop, rng, self.counts)
        self._fifo = bytearray()
        self._reset_done = False
        self.unplugged = False

    @property
    def time_s(self) -> float:
        return self.board.time_s

    @property
    def stalled(self) -> bool:
        o = self.options
        t = self.board.time_s
        return (o.stall_after_s is not None
                and o.stall_after_s <= t < o.stall_after_s + o.stall_for_s)

    def write(self, data: bytes) -> None:
        """Host → board bytes through the line. The board reads them at once (the kill byte
        acts at once), unless it is stalled or its receive FIFO still holds older bytes: then
        they queue behind those."""
        if self.unplugged:
            return
        if self.options.drop_kill and b"\x18" in data:   # test knob: kill bytes lost
            self.counts.dropped += data.count(b"\x18")
            data = data.replace(b"\x18", b"")
        data = self._line.carry(data)
        if self.stalled or self._fifo:
            room = RX_FIFO_BYTES - len(self._fifo)
            self._fifo += data[:room]
            self.counts.fifo_lost += max(0, len(data) - room)
            return
        self.board.receive(data)

    def advance(self, steps: int = 1) -> None:
        """Run ``steps`` loop periods, applying the fault timeline."""
        o = self.options
        b = self.board
        for _ in range(steps):
            if self.unplugged:
                return
            t = b.time_s
            if o.unplug_after_s is not None and t >= o.unplug_after_s - 1e-9:
                self.unplugged = True
                return
            if o.reset_after_s is not None and not self._reset_done \
                    and t >= o.reset_after_s - 1e-9:
                self._reset_done = True
                b.reboot("reset")
            if self.stalled:
                b.step(firmware=False)
                continue
            b.step()
            if self._fifo:                # read after the first period: the loop's own
                data, self._fifo = bytes(self._fifo), bytearray()   # checks come first
                b.receive(data)

    def drain(self, max_bytes: int | None = None) -> bytes:
        """Board → host bytes through the line (nothing while stalled or unplugged)."""
        if self.unplugged or self.stalled:
            return b""
        return self._line.carry(self.board.output(max_bytes))
