"""What a board declares about itself (PROTOCOL.md §5): typed views of discovery replies.

``BoardInfo`` comes from the ``hello`` reply, ``ParamInfo``/``SignalInfo``/``LoopInfo``
from the ``param``/``signal``/``loop`` replies. ``from_fields`` parses a reply's fields
(raising RemoteProtocolError naming the missing or bad key); ``to_fields`` gives the fields
a board sends. Unknown keys are ignored, so a board with a newer minor version can add keys
(PROTOCOL.md §5.1).

No I/O.
"""

from __future__ import annotations

from dataclasses import dataclass

from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.messages import NAME_RE, PROTOCOL_VERSION, Fields, format_number, parse_number


def _need(items: Fields, key: str) -> str:
    for k, v in items:
        if k == key:
            return v
    raise RemoteProtocolError("bad_field", f"reply lacks {key}=")


def _num(items: Fields, key: str) -> float:
    return parse_number(_need(items, key), key)


def _int(items: Fields, key: str) -> int:
    value = _num(items, key)
    if value != int(value) or value < 0:
        raise RemoteProtocolError("bad_number", f"{key} must be a whole number")
    return int(value)


def parse_version(text: str) -> tuple[int, int]:
    major, dot, minor = text.partition(".")
    if not dot or not major.isdigit() or not minor.isdigit():
        raise RemoteProtocolError("bad_field", f"version {text!r} is not major.minor")
    return int(major), int(minor)


def compatible(board_version: tuple[int, int], host_version=PROTOCOL_VERSION) -> bool:
    """PROTOCOL.md §5.1: same major is compatible; minor differences are tolerated."""
    return board_version[0] == host_version[0]


@dataclass(frozen=True)
class BoardInfo:
    version: tuple[int, int]
    board: str
    firmware: str
    rig: str
    rate_hz: float
    watchdog_ms: float
    params: int
    signals: int
    loops: int
    simulated: bool = False

    @classmethod
    def from_fields(cls, items: Fields) -> "BoardInfo":
        return cls(
            version=parse_version(_need(items, "proto")),
            board=_need(items, "board"),
            firmware=_need(items, "fw"),
            rig=_need(items, "rig"),
            rate_hz=_num(items, "rate_hz"),
            watchdog_ms=_num(items, "watchdog_ms"),
            params=_int(items, "params"),
            signals=_int(items, "signals"),
            loops=_int(items, "loops"),
            simulated=dict(items).get("sim", "0") == "1",
        )

    def to_fields(self) -> list[tuple[str, object]]:
        out = [
            ("proto", "%d.%d" % self.version), ("board", self.board), ("fw", self.firmware),
            ("rig", self.rig), ("rate_hz", self.rate_hz), ("watchdog_ms", self.watchdog_ms),
            ("params", self.params), ("signals", self.signals), ("loops", self.loops),
        ]
        if self.simulated:
            out.append(("sim", "1"))
        return out


@dataclass(frozen=True)
class ParamInfo:
    index: int
    name: str
    unit: str
    minimum: float
    maximum: float
    value: float
    writable: bool

    @classmethod
    def from_fields(cls, items: Fields) -> "ParamInfo":
        access = _need(items, "access")
        if access not in ("rw", "ro"):
            raise RemoteProtocolError("bad_field", f"access={access} is not rw or ro")
        name = _need(items, "name")
        if not NAME_RE.match(name):
            raise RemoteProtocolError("bad_field", f"name={name} is not a name")
        lo, hi = _num(items, "min"), _num(items, "max")
        if lo > hi:
            raise RemoteProtocolError("bad_field", f"{name}: min {lo} > max {hi}")
        return cls(_int(items, "index"), name, _need(items, "unit"), lo, hi,
                   _num(items, "value"), access == "rw")

    def to_fields(self) -> list[tuple[str, object]]:
        return [
            ("index", self.index), ("name", self.name), ("unit", self.unit),
            ("min", float(self.minimum)), ("max", float(self.maximum)),
            ("value", float(self.value)), ("access", "rw" if self.writable else "ro"),
        ]

    def admits(self, value: float) -> bool:
        return self.minimum <= value <= self.maximum


@dataclass(frozen=True)
class SignalInfo:
    index: int
    name: str
    unit: str

    @classmethod
    def from_fields(cls, items: Fields) -> "SignalInfo":
        return cls(_int(items, "index"), _need(items, "name"), _need(items, "unit"))

    def to_fields(self) -> list[tuple[str, object]]:
        return [("index", self.index), ("name", self.name), ("unit", self.unit)]


PLANT_KINDS = ("stable", "integrating", "unstable")
RELAY_STYLES = ("output", "integral")
ACTIONS = ("direct", "reverse")
# Optional fields of a loop reply that name a signal or parameter (PROTOCOL.md §5.4).
LOOP_NAME_FIELDS = ("setpoint", "limit", "dfilt", "rate")
LOOP_OPTIONAL = (*LOOP_NAME_FIELDS, "action")


@dataclass(frozen=True)
class LoopInfo:
    """A loop the board can run experiments on (PROTOCOL.md §5.4).

    ``gains`` names the parameters (kp, ki, kd) of its PID in parallel form; ``relay`` says
    whether a relay test replaces the loop output (``output``) or switches a set-point
    offset on the integral channel while the loop stays closed (``integral``, for
    open-loop-unstable loops); ``plant`` what the board author knows of the open loop.

    Optional (None when the board does not declare them; the host then falls back on the
    conventions of PROTOCOL.md §5.4): ``setpoint`` the signal (or else parameter) showing
    the set-point, ``limit`` the parameter holding the output limit, ``dfilt`` the parameter
    holding the derivative filter's time constant, ``action`` ``direct`` (e = measure −
    setpoint) or ``reverse`` (e = setpoint − measure), ``rate`` a signal measuring
    d(measure)/dt.
    """

    index: int
    name: str
    measure: str
    output: str
    gains: tuple[str, str, str]
    plant: str
    relay: str
    setpoint: str | None = None
    limit: str | None = None
    dfilt: str | None = None
    action: str | None = None
    rate: str | None = None

    @classmethod
    def from_fields(cls, items: Fields) -> "LoopInfo":
        gains = tuple(_need(items, "gains").split(","))
        if len(gains) != 3 or not all(NAME_RE.match(g) for g in gains):
            raise RemoteProtocolError("bad_field", "gains= must name three parameters kp,ki,kd")
        plant, relay = _need(items, "plant"), _need(items, "relay")
        if plant not in PLANT_KINDS:
            raise RemoteProtocolError("bad_field", f"plant={plant} is not one of {PLANT_KINDS}")
        if relay not in RELAY_STYLES:
            raise RemoteProtocolError("bad_field", f"relay={relay} is not one of {RELAY_STYLES}")
        given = dict(items)
        for key in LOOP_NAME_FIELDS:
            value = given.get(key)
            if value is not None and not NAME_RE.match(value):
                raise RemoteProtocolError("bad_field", f"{key}={value} is not a name")
        action = given.get("action")
        if action is not None and action not in ACTIONS:
            raise RemoteProtocolError("bad_field", f"action={action} is not one of {ACTIONS}")
        return cls(_int(items, "index"), _need(items, "name"), _need(items, "measure"),
                   _need(items, "output"), gains, plant, relay,
                   **{k: given.get(k) for k in LOOP_OPTIONAL})

    def to_fields(self) -> list[tuple[str, object]]:
        out: list[tuple[str, object]] = [
            ("index", self.index), ("name", self.name), ("measure", self.measure),
            ("output", self.output), ("gains", ",".join(self.gains)),
            ("plant", self.plant), ("relay", self.relay),
        ]
        return out + [(k, getattr(self, k)) for k in LOOP_OPTIONAL if getattr(self, k) is not None]


def format_value(value: float) -> str:
    """Parameter values travel with 7 significant digits (a float32 holds about 7)."""
    return format_number(float(value), 7)
