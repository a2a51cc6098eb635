"""Driving a SimBoard and a CBoard with the same bytes and the same loop periods, and
comparing what they send back frame by frame.

``Twin(rig, **kw)`` makes both boards on plants seeded alike. ``send(frame_bytes)`` feeds
both; ``run(seconds, hb_every_s=0.1)`` steps both (heartbeats in between); every board
output is collected per board. ``differences()`` lists the first frames that differ, after
``normalise``: an ``err`` reply keeps its sequence number and code, and its text only for
the codes whose text PROTOCOL.md defines (range, interlock); the board's identity words
(board=, fw=) are left out.
"""

from __future__ import annotations

import numpy as np

from rigbench.rig.firmware.boards import rig_def
from rigbench.rig.firmware.board import SimBoard
from rigbench.wire import HostCodec
from rigbench.wire.frame import encode_frame

from cboard import CBoard

_TEXT_KEPT = ("range", "interlock")


def normalise(line: bytes) -> str:
    text = line.decode("ascii", "replace").rstrip("\n")
    body = text[1:text.rfind("|")] if text.startswith("@") and "|" in text else text
    tokens = body.split(" ")
    if tokens[0] == "err" and len(tokens) > 3 and tokens[2] not in _TEXT_KEPT:
        tokens = tokens[:3]
    if tokens[0] == "ok":
        tokens = [t for t in tokens if not t.startswith(("board=", "fw="))]
    return " ".join(tokens)


class Twin:
    def __init__(self, rig: str = "plant", *, seed: int = 0, noise: float = 1.0,
                 rate_hz: float = 500.0, real: str = "double", **rig_kw) -> None:
        rd = rig_def(rig, rate_hz=rate_hz, **rig_kw)
        self.py = SimBoard(rd, rd.make_plant(np.random.default_rng(seed), noise, rate_hz))
        self.c = CBoard(rd, rd.make_plant(np.random.default_rng(seed), noise, rate_hz),
                        real=real)
        self.out = {"py": bytearray(), "c": bytearray()}
        self.codec = HostCodec()
        self._next_hb = 0.0

    @property
    def boards(self):
        return (("py", self.py), ("c", self.c))

    def send(self, data: bytes) -> None:
        for key, b in self.boards:
            b.receive(data)
            self.out[key] += b.output()

    def body(self, text: str) -> None:
        self.send(encode_frame(text))

    def run(self, seconds: float, hb_every_s: float | None = 0.1) -> None:
        steps = round(seconds * self.py.rate_hz)
        for _ in range(steps):
            if hb_every_s is not None and self.py.time_s >= self._next_hb - 1e-12:
                self.send(encode_frame("hb"))
                self._next_hb = self.py.time_s + hb_every_s
            for key, b in self.boards:
                b.step()
                self.out[key] += b.output()

    def lines(self, key: str) -> list[str]:
        return [normalise(x) for x in bytes(self.out[key]).split(b"\n") if x]

    def differences(self, limit: int = 5) -> list[tuple[int, str, str]]:
        a, b = self.lines("py"), self.lines("c")
        diff = [(i, x, y) for i, (x, y) in enumerate(zip(a, b)) if x != y]
        if len(a) != len(b):
            diff.append((min(len(a), len(b)), f"{len(a)} lines", f"{len(b)} lines"))
        return diff[:limit]
