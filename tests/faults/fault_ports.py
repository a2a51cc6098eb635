"""A port wrapper for fault tests: bytes before the board's first byte (a desktop probing a
new USB serial device), and reads cut into small pieces with broken frame starts slipped in.

Helpers for tests/faults only.
"""

from __future__ import annotations

import numpy as np

MODEM_PROBE = (b"AT\r\nAT+CGMI\r\nATE0V1\r\n+++\r\n\x00\xff\xfe~\x7f@@@|\r\n@tm 1 2|0000\r\n"
               b"@ok 9|ZZZZ\n" + bytes(range(0x80, 0xA0)) + b"@hello 1 1.0")  # ends mid-frame


class ShapedPort:
    """A port wrapper: ``prefix`` bytes arrive before anything the board sends, and reads
    are cut into pieces of 1..``max_piece`` bytes with a cut-off frame start (``@tm 7``)
    slipped in on one read in ``glitch_every`` on average, at random (a fixed period could
    fall on the same byte of every resend). Composition: everything else is the port's."""

    def __init__(self, port, *, prefix: bytes = b"", max_piece: int | None = None,
                 glitch_every: int = 0, seed: int = 0) -> None:
        self._port = port
        self._prefix = prefix
        self._max_piece = max_piece
        self._glitch_every = glitch_every
        self._rng = np.random.default_rng(seed)
        self.reads = 0
        self.glitches = 0

    def __getattr__(self, name):
        return getattr(self._port, name)

    @property
    def in_waiting(self) -> int:
        if self._prefix:
            return len(self._prefix)
        return self._port.in_waiting

    def read(self, size: int = 1) -> bytes:
        if self._prefix:
            data, self._prefix = self._prefix[:size], self._prefix[size:]
            return data
        self.reads += 1
        if self._max_piece:
            size = min(size, int(self._rng.integers(1, self._max_piece + 1)))
        data = self._port.read(size)
        if data and self._glitch_every and self._rng.random() * self._glitch_every < 1.0:
            self.glitches += 1
            data = b"@tm 7 " + data
        return data
