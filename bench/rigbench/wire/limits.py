"""Limits on what a board may declare (PROTOCOL.md §5.6), checked before the host acts on it.

A board chooses the numbers in its ``hello`` reply; a host that believed any of them would
allocate in proportion (a telemetry ring per signal, a ``param`` request per parameter), so
every count, rate and time is checked against a fixed range first, and every declared name
and unit against the grammar the recorder's CSV header reader uses
(rigbench.recordings.recording: ``name [unit]`` cells separated by commas). A declaration
outside the limits raises ``DeclarationError`` naming it.

No I/O. Imports only rigbench.wire.
"""

from __future__ import annotations

import math
import re

from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.frame import MAX_BODY
from rigbench.wire.messages import NAME_RE, format_fields

__all__ = ["DeclarationError", "MAX_PARAMS", "MAX_SIGNALS", "MAX_LOOPS", "RATE_HZ_RANGE",
           "WATCHDOG_MS_RANGE", "UNIT_RE", "check_hello", "check_params", "check_signals",
           "check_loops", "set_lines"]

MAX_PARAMS = 256
# a telemetry frame carries one value per signal in a 193-byte body (PROTOCOL.md §2): even
# one-character values stop fitting near 90 signals
MAX_SIGNALS = 64
MAX_LOOPS = 16
RATE_HZ_RANGE = (1.0, 100_000.0)      # the board's loop rate
# the host's heartbeat comes every 100 ms (PROTOCOL.md §7.2): a shorter watchdog trips on
# any jitter; a longer one than 10 s leaves a motor running far too long without a host
WATCHDOG_MS_RANGE = (150.0, 10_000.0)
# a unit is a word (§3) without the comma, which separates the columns of a recording
UNIT_RE = re.compile(r"[A-Za-z0-9_.:/%+^-]{1,48}\Z")
# the first columns of a recording (rigbench.recordings.recording.FIXED_COLUMNS)
RESERVED_SIGNALS = ("host_time", "board_time", "frame")


class DeclarationError(RemoteProtocolError):
    """The board declared something outside PROTOCOL.md §5.6."""

    def __init__(self, detail: str) -> None:
        super().__init__("bad_field", detail)


def _within(what: str, value: float, lo: float, hi: float) -> None:
    if not (math.isfinite(value) and lo <= value <= hi):
        raise DeclarationError(f"hello {what}={value:g} is outside {lo:g}..{hi:g}")


def check_hello(info) -> None:
    """Counts, loop rate and watchdog of a ``hello`` reply (a ``BoardInfo``)."""
    for what, value, most in (("params", info.params, MAX_PARAMS),
                              ("signals", info.signals, MAX_SIGNALS),
                              ("loops", info.loops, MAX_LOOPS)):
        if value > most:
            raise DeclarationError(f"hello {what}={value} is more than {most}")
    _within("rate_hz", info.rate_hz, *RATE_HZ_RANGE)
    _within("watchdog_ms", info.watchdog_ms, *WATCHDOG_MS_RANGE)


def _name_unit(kind: str, index: int, name: str, unit: str, seen: set) -> None:
    if not NAME_RE.match(name):
        raise DeclarationError(f"{kind} {index} name={name!r} is not a name "
                               "(a-z first, then a-z 0-9 _, at most 32)")
    if not UNIT_RE.match(unit):
        raise DeclarationError(f"{kind} {index} {name} unit={unit!r} is not a unit "
                               "(at most 48 of A-Z a-z 0-9 _ . : / % + ^ -, no comma)")
    if name in seen:
        raise DeclarationError(f"{kind} {index} name={name} is declared twice")
    seen.add(name)


def check_params(params) -> None:
    """``ParamInfo`` list: names, units, finite ranges and values, no name twice."""
    seen: set = set()
    for i, p in enumerate(params):
        _name_unit("param", i, p.name, p.unit, seen)
        if p.index != i:
            raise DeclarationError(f"param {i} {p.name} says index={p.index}")
        for what, value in (("min", p.minimum), ("max", p.maximum), ("value", p.value)):
            if not math.isfinite(value):
                raise DeclarationError(f"param {i} {p.name} {what}={value} is not finite")


def check_signals(signals) -> None:
    """``SignalInfo`` list: names, units (the recording header's rule), no name twice."""
    seen: set = set(RESERVED_SIGNALS)
    for i, s in enumerate(signals):
        if s.name in RESERVED_SIGNALS:
            raise DeclarationError(f"signal {i} name={s.name} is a name the host reserves "
                                   f"({', '.join(RESERVED_SIGNALS)})")
        _name_unit("signal", i, s.name, s.unit, seen)
        if s.index != i:
            raise DeclarationError(f"signal {i} {s.name} says index={s.index}")


def check_loops(loops) -> None:
    """``LoopInfo`` list: no loop name twice."""
    seen: set = set()
    for i, lp in enumerate(loops):
        if lp.name in seen:
            raise DeclarationError(f"loop {i} name={lp.name} is declared twice")
        seen.add(lp.name)


def set_lines(values, *, body_max: int = MAX_BODY) -> list[list[tuple[str, float]]]:
    """Split an atomic group of assignments into lines (PROTOCOL.md §5.5): every line but the
    last goes as ``stage``, the last as ``set``, each body within ``body_max`` bytes with the
    largest sequence number (the ``set`` reply is no longer than its command: "ok" is shorter
    than "set", and the board writes values with the same 7 digits). Raises ValueError for an
    assignment that cannot fit in a line at all."""
    lines: list[list] = []
    size = 0
    head = len("stage 65535")
    for pair in values:
        token = format_fields([pair])[0]
        if head + 1 + len(token) > body_max:
            raise ValueError(f"{token[:40]}… is longer than a line can carry")
        if not lines or size + 1 + len(token) > body_max:
            lines.append([])
            size = head
        lines[-1].append(pair)
        size += 1 + len(token)
    return lines
