"""Checking a ``mode`` command's fields (PROTOCOL.md §8) into a ``ModeRun``, and the
bounded transmit buffer of the simulated board (§6.1).

Mode fields arrive as words; each mode has a fixed set of keys (some required, some with a
default), numbers must be numbers, and values have ranges. A refusal names the first
problem with a PROTOCOL.md §4.3 code: ``bad_args`` (missing, extra or malformed field),
``unknown_name`` (no such loop, or no body push on this rig), ``range``.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

from rigbench.rig.firmware.boards import RigDef
from rigbench.rig.firmware.control import ModeRun
from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.messages import parse_number

__all__ = ["ModeRefusal", "parse_mode", "TxBuffer", "MODE_KEYS", "OPEN_MAX_S"]

OPEN_MAX_S = 10.0      # PROTOCOL.md §8: an open-loop run lasts at most 10 s
INJECT_MAX_S = 60.0    # our own bound on an injection

# mode -> (required keys, optional keys with defaults)
MODE_KEYS: dict[str, tuple[tuple[str, ...], dict[str, str]]] = {
    "off": ((), {}),
    "hold": ((), {}),
    "relay": (("loop", "amp"), {"hyst": "0", "bias": "0", "bound": ""}),
    "open": (("loop", "out", "time_s"), {}),
    "inject": (("loop", "at", "amp", "time_s"), {"shape": "pulse"}),
}
_WORDS = {"shape": ("pulse", "step"), "at": ("setpoint", "output", "body")}


@dataclass(frozen=True)
class ModeRefusal:
    code: str
    text: str


def parse_mode(name: str, args, rig: RigDef, params: dict[str, float], *,
               has_body_push: bool) -> ModeRun | ModeRefusal:
    """The ModeRun for ``mode <name> <args>``, or why it is refused (nothing changes)."""
    required, optional = MODE_KEYS[name]
    given = dict(args)
    for key in given:
        if key not in required and key not in optional:
            return ModeRefusal("bad_args", f"{name} takes no {key}")
    for key in required:
        if key not in given:
            return ModeRefusal("bad_args", f"{name} needs {key}=")
    fields = {**optional, **given}
    run = ModeRun(name=name)
    if name in ("off", "hold"):
        return run
    loop = fields["loop"]
    try:
        lp = rig.loop(loop)
    except KeyError:
        return ModeRefusal("unknown_name", f"no loop {loop}")
    run.loop = loop
    nums: dict[str, float] = {}
    for key, text in fields.items():
        if key in ("loop", "shape", "at") or text == "":
            continue
        try:
            nums[key] = parse_number(text, key)
        except RemoteProtocolError:
            return ModeRefusal("bad_args", f"{key} is not a number")
    for key, allowed in _WORDS.items():
        if key in fields and fields[key] not in allowed:
            words = ", ".join(allowed[:-1]) + " or " + allowed[-1]
            return ModeRefusal("bad_args", f"{key} must be {words}")
    if name == "relay":
        if nums["amp"] <= 0.0:
            return ModeRefusal("range", "amp > 0")
        if nums["hyst"] < 0.0:
            return ModeRefusal("range", "hyst >= 0")
        if "bound" in nums and nums["bound"] <= 0.0:
            return ModeRefusal("range", "bound > 0")
        run.amp, run.hyst, run.bias = nums["amp"], nums["hyst"], nums["bias"]
        run.bound = nums.get("bound")
    elif name == "open":
        limit = params[lp.limit]
        if abs(nums["out"]) > limit:
            return ModeRefusal("range", f"out {-limit:g}..{limit:g}")
        if not 0.0 < nums["time_s"] <= OPEN_MAX_S:
            return ModeRefusal("range", f"time_s 0..{OPEN_MAX_S:g}")
        run.out, run.time_s = nums["out"], nums["time_s"]
    else:  # inject
        if not 0.0 < nums["time_s"] <= INJECT_MAX_S:
            return ModeRefusal("range", f"time_s 0..{INJECT_MAX_S:g}")
        if fields["at"] == "body" and not has_body_push:
            return ModeRefusal("unknown_name", "at=body: this rig has no body push")
        run.shape, run.at = fields["shape"], fields["at"]
        run.amp, run.time_s = nums["amp"], nums["time_s"]
    return run


def applied_fields(run: ModeRun) -> list[tuple[str, object]]:
    """Reply fields of a started mode: the values the board applied."""
    out: list[tuple[str, object]] = [("mode", run.name)]
    if run.name == "relay":
        out += [("loop", run.loop), ("amp", run.amp), ("hyst", run.hyst), ("bias", run.bias)]
        if run.bound is not None:
            out.append(("bound", run.bound))
    elif run.name == "open":
        out += [("loop", run.loop), ("out", run.out), ("time_s", run.time_s)]
    elif run.name == "inject":
        out += [("loop", run.loop), ("shape", run.shape), ("at", run.at), ("amp", run.amp),
                ("time_s", run.time_s)]
    return out


class TxBuffer:
    """The board's bounded transmit buffer (PROTOCOL.md §6.1: never block, drop and count).

    Frames leave in the order they were queued. Telemetry is taken only while it leaves
    ``reserve_bytes`` free for replies, events and status; status only while it fits in
    ``capacity_bytes``; replies and events always, up to ``hard_limit_bytes`` (a host that
    writes commands and never reads). ``put`` returns False when a frame was dropped.
    """

    def __init__(self, capacity_bytes: int = 4096, reserve_bytes: int = 1024,
                 hard_limit_bytes: int = 65536) -> None:
        if not 0 <= reserve_bytes < capacity_bytes <= hard_limit_bytes:
            raise ValueError("need 0 <= reserve_bytes < capacity_bytes <= hard_limit_bytes")
        self.capacity_bytes = capacity_bytes
        self.reserve_bytes = reserve_bytes
        self.hard_limit_bytes = hard_limit_bytes
        self._frames: deque[bytes] = deque()
        self._head = b""
        self.used = 0

    def put(self, frame: bytes, kind: str) -> bool:
        room = {"telemetry": self.capacity_bytes - self.reserve_bytes,
                "status": self.capacity_bytes}.get(kind, self.hard_limit_bytes)
        if self.used + len(frame) > room:
            return False
        self._frames.append(frame)
        self.used += len(frame)
        return True

    def take(self, max_bytes: int | None = None) -> bytes:
        if max_bytes is None:
            data = self._head + b"".join(self._frames)
            self._frames.clear()
            self._head = b""
            self.used = 0
            return data
        parts = [self._head]
        n = len(self._head)
        while self._frames and n < max_bytes:
            f = self._frames.popleft()
            parts.append(f)
            n += len(f)
        data = b"".join(parts)
        self._head = data[max_bytes:]
        data = data[:max_bytes]
        self.used -= len(data)
        return data

    def clear(self) -> None:
        self._frames.clear()
        self._head = b""
        self.used = 0
