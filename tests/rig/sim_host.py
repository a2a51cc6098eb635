"""Test helper: a host wired back to back to a SimBoard (HostCodec on the host side).

No serial port and no clock: the test decides when the board steps. ``run(seconds)``
steps the board and sends a heartbeat every ``hb_every_s`` of board time (None: none),
collecting everything the board sends.
"""

from __future__ import annotations

import numpy as np

from rigbench.wire import HostCodec
from rigbench.wire import messages as m


class Host:
    def __init__(self, board) -> None:
        self.board = board
        self.codec = HostCodec()
        self.log: list = []          # every message and BadFrame the board sent, in order
        self.hb_every_s: float | None = 0.1
        self._next_hb = 0.0

    def pump(self) -> list:
        got = self.codec.receive(self.board.output())
        self.log.extend(got)
        return got

    def send(self, cls, *args, **kwargs):
        """Send one command; return the list of replies carrying its sequence number."""
        msg, data = self.codec.command(cls, *args, **kwargs)
        self.board.receive(data)
        return [x for x in self.pump() if isinstance(x, (m.Ok, m.Err)) and x.seq == msg.seq]

    def ask(self, cls, *args, **kwargs):
        """Send one command and return its single reply (asserts there is exactly one)."""
        replies = self.send(cls, *args, **kwargs)
        assert len(replies) == 1, replies
        return replies[0]

    def hb(self) -> None:
        self.board.receive(self.codec.encode(m.Heartbeat()))

    def run(self, seconds: float) -> list:
        """Step the board for ``seconds`` of board time; return what it sent meanwhile."""
        b = self.board
        out = []
        for _ in range(round(seconds / b.dt_s)):
            if self.hb_every_s is not None and b.time_s >= self._next_hb - 1e-9:
                self.hb()
                self._next_hb = b.time_s + self.hb_every_s
            b.step()
            out.extend(self.pump())
        return out

    def start(self, mode: str = "hold", *args, settle_s: float = 0.2):
        """Heartbeat, arm and start ``mode``; return the mode reply."""
        self.run(settle_s)
        assert isinstance(self.ask(m.Arm), m.Ok)
        return self.ask(m.Mode, mode, tuple(args))

    def events(self, msgs=None, kind: str | None = None) -> list:
        msgs = self.log if msgs is None else msgs
        return [x for x in msgs if isinstance(x, m.Event) and (kind is None or x.kind == kind)]

    @staticmethod
    def telemetry(msgs) -> np.ndarray:
        rows = [x.values for x in msgs if isinstance(x, m.Telemetry)]
        return np.array(rows, dtype=float)

    def column(self, msgs, name: str) -> np.ndarray:
        names = [s.name for s in self.board.rig.signals]
        return self.telemetry(msgs)[:, names.index(name)]
