"""A recording played back as a read-only board speaking the line protocol (no I/O here).

``ReplayBoard(recording)`` answers host commands from what the recording's YAML sidecar
kept (rigbench.recordings.recording): ``hello`` with the recorded board's identity (marked ``sim=1``: it
is not a live rig), ``param``/``get`` with the parameters at the start of the recording,
``signal`` with its columns, ``loop`` with the loops when the sidecar lists them (else it
declares none), ``status`` with the motor state, mode and fault the recording saw at that
moment, ``stream`` (the recorded rate divided by a whole number, as a board does). Every
command that would change something (``set`` → ``busy``; ``arm``, ``disarm``, ``mode``,
``clear``, ``save``, ``restore``, ``kill`` → ``state``) is refused with the text "replay is
read-only"; the kill byte is ignored (nothing moves). Framing is the board side of
rigbench.wire (``BoardCodec``), so every frame is checked and counted as a board would.

Time: ``advance(tau_s)`` queues what is due by ``tau_s`` recorded seconds after the
start: telemetry rows with their recorded frame numbers and board times (PROTOCOL.md §6.1),
the board's recorded events (``ev``, §6.3) and a status frame every ``status_period_s``
(§6.2). It starts, like a board after power-up, with ``ev boot`` and telemetry off. With
``loop`` the recording starts over after its end, frame counter and board clock running
on (so the host sees no restart). Output beyond ``max_buffer`` bytes is dropped and
counted (``drops``), as a board never blocks on a full link.

Imports rigbench.wire and the recording reader (rigbench.recordings.recording).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigbench.wire import messages as m
from rigbench.wire.codec import BoardCodec, KillByte
from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.describe import BoardInfo, LoopInfo, ParamInfo, SignalInfo, parse_version
from rigbench.wire.frame import BadFrame
from rigbench.wire.limits import (
    MAX_LOOPS, MAX_PARAMS, RATE_HZ_RANGE, WATCHDOG_MS_RANGE, DeclarationError, check_params,
    check_signals,
)

__all__ = ["ReplayBoard", "READ_ONLY"]

READ_ONLY = "replay is read-only"
STREAM_DIV_MAX = (1 << 32) - 1   # the largest telemetry divider, as the simulated board's
U32 = 1 << 32
_REFUSE = {m.Set: "busy", m.Arm: "state", m.Disarm: "state", m.Mode: "state",
           m.Clear: "state", m.Save: "state", m.Restore: "state", m.Kill: "state"}
_LOOP_KEYS = ("name", "measure", "output", "gains", "plant", "relay")


@dataclass
class _State:
    motor: str = "off"
    mode: str = "off"
    loop: str | None = None
    fault: str | None = None


def _number(where: str, field: str, value, default: float, bounds) -> float:
    """A sidecar number within ``bounds`` (PROTOCOL.md §5.6); ``default`` when absent."""
    if value is None:
        return default
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (
            math.isfinite(value) and bounds[0] <= value <= bounds[1]):
        raise ValueError(f"{where}: {field}: {value!r} is not a number in "
                         f"{bounds[0]:g}..{bounds[1]:g}")
    return float(value)


def _param(where: str, index: int, name, p) -> ParamInfo:
    """One entry of a sidecar's ``params_at_start``, checked field by field."""
    field = f"params_at_start.{name}"
    if not isinstance(name, str) or not m.NAME_RE.match(name):
        raise ValueError(f"{where}: params_at_start: {name!r} is not a parameter name")
    if not isinstance(p, dict):
        raise ValueError(f"{where}: {field}: expected a mapping with value, min, max, writable")
    nums = {}
    for key in ("value", "min", "max"):
        v = p.get(key)
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise ValueError(f"{where}: {field}.{key}: {v!r} is not a finite number")
        nums[key] = float(v)
    if nums["min"] > nums["max"]:
        raise ValueError(f"{where}: {field}: min {nums['min']:g} > max {nums['max']:g}")
    if not isinstance(p.get("writable"), bool):
        raise ValueError(f"{where}: {field}.writable: expected true or false")
    return ParamInfo(index, name, _word(p.get("unit"), "1"), nums["min"], nums["max"],
                     nums["value"], p["writable"])


def _time(value) -> bool:
    return (isinstance(value, (int, float)) and not isinstance(value, bool)
            and math.isfinite(value) and abs(value) < 1e9)


def _board_event(e: dict):
    """(kind, fields) of a recorded board event a board could send again, else None (a
    hand-edited event with a kind or field that is not a name is left out)."""
    kind = e.get("kind")
    fields = e.get("fields") or {}
    if not (isinstance(kind, str) and m.NAME_RE.match(kind) and isinstance(fields, dict)):
        return None
    out = []
    for k, v in fields.items():
        if v is None:
            continue
        if not (isinstance(k, str) and m.NAME_RE.match(k)):
            return None
        if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
            out.append((k, v))
        else:
            out.append((k, _word(v, "-")))
    return kind, tuple(out)


def _word(value, default: str) -> str:
    text = str(value) if value is not None else ""
    return text if m.WORD_RE.match(text) else default


class ReplayBoard:
    """See the module docstring. ``recording``: a rigbench.recordings.recording.Recording."""

    def __init__(self, recording, *, loop: bool = False, status_period_s: float = 0.2,
                 max_buffer: int = 65536) -> None:
        if len(recording) < 2:
            raise ValueError(f"{recording.path}: a replay needs at least two rows")
        self.rec = recording
        bad = ~np.isfinite(recording.values)
        if bad.any():
            row, col = (int(i) for i in np.argwhere(bad)[0])
            raise ValueError(f"{recording.path}:{row + 2}: signal {recording.signals[col]} is "
                             f"{recording.values[row, col]}: a board sends only finite numbers")
        for what, column in (("board_time", recording.board_time_s),
                             ("host_time", recording.host_time_s)):
            if not (np.isfinite(column).all() and (np.abs(column) < 1e9).all()):
                raise ValueError(f"{recording.path}: {what} holds a value that is not a time"
                                 " (finite, under 1e9 s)")
        self.loop = loop
        self.status_period_s = status_period_s
        self.max_buffer = max_buffer
        side = recording.sidecar or {}
        b = recording.board_time_s
        self.t0 = float(b[0])
        self.dt_s = float(np.median(np.diff(b)))
        if not self.dt_s > 0:
            raise ValueError(f"{recording.path}: board times do not increase")
        self.rate_hz = 1.0 / self.dt_s
        self.offsets = b - self.t0                  # row k is due at tau = offsets[k]
        self.cycle_s = float(self.offsets[-1]) + self.dt_s
        self.frame_span = int(recording.frame[-1] - recording.frame[0]) + 1
        self.info, self.params, self.signals, self.loops = self._declarations(side)
        events = [e for e in recording.events if isinstance(e, dict)]
        self.events = sorted(
            ((float(e["board_time_s"]) - self.t0, _board_event(e)) for e in events
             if e.get("source") == "board" and _time(e.get("board_time_s"))
             and _board_event(e) is not None),
            key=lambda x: x[0])
        self.states = sorted(
            ((float(e["host_time_s"]) - float(recording.host_time_s[0]), e["fields"])
             for e in events if e.get("source") == "status"
             and e.get("kind") == "state" and _time(e.get("host_time_s"))
             and isinstance(e.get("fields"), dict)),
            key=lambda x: x[0])
        self.codec = BoardCodec()
        self.out = bytearray()
        self.tau = 0.0
        self.stream_div = 0
        self.drops = 0
        self.rx_err = 0
        self.last_hb_tau: float | None = None
        self._row = 0          # next row (within the cycle) to consider
        self._ev = 0           # next event (within the cycle)
        self._cycle = 0
        self._next_status = 0.0
        self._put(m.Event(self._time_us(0.0), "boot", (("reason", "power"),)), essential=True)

    # ------------------------------------------------------------------ declarations

    def _declarations(self, side: dict):
        where = f"{Path(self.rec.path).with_suffix('.yaml')}"  # the recording's sidecar
        board = side.get("board") or {}
        if not isinstance(board, dict):
            raise ValueError(f"{where}: board: expected a mapping")
        try:
            version = parse_version(str(board.get("protocol", "1.0")))
        except Exception:  # noqa: BLE001 - an unreadable version: the host's own
            version = m.PROTOCOL_VERSION
        params = []
        table = side.get("params_at_start") or {}
        if not isinstance(table, dict):
            raise ValueError(f"{where}: params_at_start: expected a mapping of parameters")
        if len(table) > MAX_PARAMS:
            raise ValueError(f"{where}: params_at_start: more than {MAX_PARAMS} parameters")
        for i, (name, p) in enumerate(table.items()):
            params.append(_param(where, i, name, p))
        try:  # the rules a live board's declarations meet (PROTOCOL.md §5.6)
            check_params(params)
            check_signals([SignalInfo(i, n, u) for i, (n, u) in
                           enumerate(zip(self.rec.signals, self.rec.units))])
        except DeclarationError as exc:
            raise ValueError(f"{where}: {exc.detail}") from None
        signals = [SignalInfo(i, n, u) for i, (n, u) in
                   enumerate(zip(self.rec.signals, self.rec.units))]
        loops = []
        declared = side.get("loops") or []
        if not isinstance(declared, list):
            raise ValueError(f"{where}: loops: expected a list of loop declarations")
        for lp in declared:
            if not (isinstance(lp, dict) and all(k in lp for k in _LOOP_KEYS)):
                continue
            fields = [(k, ",".join(map(str, v)) if isinstance(v, list) else str(v))
                      for k, v in lp.items() if k != "index"]
            try:  # the same checks as a loop reply from a board (optional fields included)
                loops.append(LoopInfo.from_fields(tuple([("index", str(len(loops)))] + fields)))
            except RemoteProtocolError:
                continue
        info = BoardInfo(version, _word(board.get("board"), "replay"),
                         _word(board.get("firmware"), "unknown"), _word(board.get("rig"), "unknown"),
                         _number(where, "board.rate_hz", board.get("rate_hz"),
                                 round(self.rate_hz, 3), RATE_HZ_RANGE),
                         _number(where, "board.watchdog_ms", board.get("watchdog_ms"), 500.0,
                                 WATCHDOG_MS_RANGE),
                         len(params), len(signals), len(loops[:MAX_LOOPS]), True)
        return info, params, signals, loops[:MAX_LOOPS]

    # ------------------------------------------------------------------ output

    def _time_us(self, tau: float) -> int:
        return round((self.t0 + tau) * 1e6) % U32

    def _put(self, msg, *, essential: bool = False) -> None:
        frame = BoardCodec.encode(msg)
        if not essential and len(self.out) + len(frame) > self.max_buffer:
            self.drops += 1
            return
        self.out += frame

    def drain(self, max_bytes: int | None = None) -> bytes:
        n = len(self.out) if max_bytes is None else min(max_bytes, len(self.out))
        data = bytes(self.out[:n])
        del self.out[:n]
        return data

    def state_at(self, tau: float) -> _State:
        """Motor state, mode, loop and fault as the recording saw them at ``tau``."""
        st = _State()
        local = tau - self._cycle * self.cycle_s if self.loop else tau
        for k, (t, f) in enumerate(self.states):
            if t > local and k:  # before the first change seen: the first state seen
                break
            st = _State(_word(f.get("motor"), "off"), _word(f.get("mode"), "off"),
                        _word(f.get("loop"), "") or None, _word(f.get("fault"), "") or None)
        return st

    def _status_fields(self) -> list:
        st = self.state_at(self.tau)
        hb = self.tau - (self.last_hb_tau if self.last_hb_tau is not None else 0.0)
        return [("mode", st.mode), ("loop", st.loop or "-"), ("motor", st.motor),
                ("fault", st.fault or "none"), ("why", "none"), ("drops", self.drops),
                ("rx_err", self.rx_err), ("hb_ms", min(round(hb * 1000), U32 - 1))]

    def next_due(self) -> float:
        """The next ``tau`` at which something is due (rows, events or status)."""
        due = [self._next_status]
        base = self._cycle * self.cycle_s
        if self._row < len(self.offsets) and self.stream_div:
            due.append(base + float(self.offsets[self._row]))
        if self._ev < len(self.events):
            due.append(base + self.events[self._ev][0])
        if self.loop and self._row >= len(self.offsets):
            due.append(base + self.cycle_s)
        return max(min(due), self.tau)

    def advance(self, tau: float) -> None:
        """Queue everything due up to ``tau`` recorded seconds after the start."""
        while True:
            base = self._cycle * self.cycle_s
            self._emit_until(tau, base)
            done = self._row >= len(self.offsets) and self._ev >= len(self.events)
            if not (self.loop and done and tau >= base + self.cycle_s):
                break
            self._cycle += 1
            self._row = self._ev = 0
        self.tau = max(self.tau, tau)
        while self._next_status <= tau:
            self.tau = max(self.tau, self._next_status)
            self._put(m.Status(self._time_us(self._next_status), tuple(self._status_fields())),
                      essential=True)
            self._next_status += self.status_period_s
        self.tau = max(self.tau, tau)

    def _emit_until(self, tau: float, base: float) -> None:
        rec, off = self.rec, self.offsets
        frames, values = rec.frame, rec.values
        while True:
            t_row = base + float(off[self._row]) if self._row < len(off) else math.inf
            t_ev = base + self.events[self._ev][0] if self._ev < len(self.events) else math.inf
            t = min(t_row, t_ev)
            if t > tau:
                return
            if t_ev <= t_row:
                kind, fields = self.events[self._ev][1]
                self._put(m.Event(self._time_us(t_ev), kind, fields), essential=True)
                self._ev += 1
                continue
            k = self._row
            self._row += 1
            if self.stream_div and k % self.stream_div == 0:
                frame = (int(frames[k]) + self._cycle * self.frame_span) % U32
                self._put(m.Telemetry(frame, self._time_us(t_row),
                                      tuple(float(x) for x in values[k])))

    # ------------------------------------------------------------------ input

    def receive(self, data: bytes) -> None:
        """Host bytes: commands are answered at once (at the present ``tau``)."""
        for ev in self.codec.receive(data):
            if isinstance(ev, KillByte):
                continue  # nothing to switch off: the recorded motor state plays on
            if isinstance(ev, BadFrame):
                self.rx_err += 1
                self._answer_bad(ev)
            elif isinstance(ev, m.Heartbeat):
                self.last_hb_tau = self.tau
            else:
                self._put(self._answer(ev), essential=True)

    def _answer_bad(self, ev: BadFrame) -> None:
        tokens = ev.raw.decode("ascii", "replace").split(" ")
        if (ev.code in ("bad_number", "bad_field") and len(tokens) >= 2
                and tokens[0] in m.COMMANDS and tokens[1].isdigit()
                and int(tokens[1]) < m.SEQ_MODULO):
            self._put(m.Err(int(tokens[1]), "bad_args", ev.code), essential=True)

    def _answer(self, cmd):
        seq = cmd.seq
        kind = type(cmd)
        if kind in _REFUSE:
            return m.Err(seq, _REFUSE[kind], READ_ONLY)
        if kind is m.Hello:
            if parse_version(cmd.version)[0] != self.info.version[0]:
                return m.Err(seq, "version", f"board speaks {self.info.version[0]}.x")
            return m.Ok(seq, tuple(self.info.to_fields()))
        if kind in (m.DescribeParam, m.DescribeSignal, m.DescribeLoop):
            table = {m.DescribeParam: self.params, m.DescribeSignal: self.signals,
                     m.DescribeLoop: self.loops}[kind]
            if cmd.index >= len(table):
                return m.Err(seq, "unknown_name", f"index {cmd.index}")
            return m.Ok(seq, tuple(table[cmd.index].to_fields()))
        if kind is m.Get:
            if len(set(cmd.names)) != len(cmd.names):  # PROTOCOL.md §5.5, as a board does
                return m.Err(seq, "bad_args", "a name given twice")
            byname = {p.name: p for p in self.params}
            missing = [n for n in cmd.names if n not in byname]
            if missing:
                return m.Err(seq, "unknown_name", missing[0])
            return m.Ok(seq, tuple((n, byname[n].value) for n in cmd.names))
        if kind is m.Stream:
            return self._stream(seq, cmd.rate_hz)
        if kind is m.StatusRequest:
            return m.Ok(seq, tuple(self._status_fields()))
        return m.Err(seq, "unknown_verb", type(cmd).VERB)  # pragma: no cover - table complete

    def _stream(self, seq: int, rate: float):
        if rate < 0:
            return m.Err(seq, "range", f"rate_hz 0..{self.rate_hz:.6g}")
        if rate == 0:
            self.stream_div = 0
            return m.Ok(seq, (("rate_hz", 0),))
        ratio = min(self.rate_hz / rate, STREAM_DIV_MAX)   # §6.1: the slowest below that
        lo, hi = max(1, math.floor(ratio)), max(1, math.ceil(ratio))
        self.stream_div = lo if abs(self.rate_hz / lo - rate) <= abs(self.rate_hz / hi - rate) \
            else hi
        return m.Ok(seq, (("rate_hz", self.rate_hz / self.stream_div),))
