"""A small fake board for link tests: board-side protocol over BoardCodec, no physics.

``FakeBoard`` is the board's behaviour driven by (time, bytes): it answers every command of
PROTOCOL.md §4 from a table of parameters, streams telemetry (simple functions of time),
sends status frames, keeps the motor-off interlock and the watchdog, and can be told to
swallow replies, lose or drop telemetry frames, start its clocks near the 32-bit wrap, or
restart. Two transports drive it:

* ``FakePort`` — a pyserial-like object with a virtual clock (``port.clock``) that advances
  only while the host reads, like the simulated board's ``clock=virtual`` mode;
* ``PtyBoard`` — the board on the master side of a pseudo-terminal in real time, so the
  link opens a real device path (and unplug is closing the master).
"""

from __future__ import annotations

import errno
from dataclasses import replace
import math
import os
import select
import threading
import time
import tty

import serial

from rigbench.wire.codec import BoardCodec
from rigbench.wire.crc import crc16
from rigbench.wire.describe import BoardInfo, LoopInfo, ParamInfo, SignalInfo, format_value
from rigbench.wire.frame import BadFrame, KillByte
from rigbench.wire.messages import (
    Arm, Clear, DescribeLoop, DescribeParam, DescribeSignal, Disarm, Err, Event, Get,
    Heartbeat, Hello, Kill, Mode, Ok, Restore, Save, Set, Status, StatusRequest, Stream,
    Telemetry,
)

U32 = 1 << 32

PARAMS = (
    ParamInfo(0, "tilt_kp", "1", 0.0, 100.0, 20.0, True),
    ParamInfo(1, "tilt_ki", "1/s", 0.0, 50.0, 1.0, True),
    ParamInfo(2, "tilt_kd", "s", 0.0, 5.0, 0.5, True),
    ParamInfo(3, "trip_tilt", "deg", 1.0, 45.0, 20.0, True),
    ParamInfo(4, "loop_hz", "Hz", 500.0, 500.0, 500.0, False),
)
SIGNALS = (SignalInfo(0, "tilt", "deg"), SignalInfo(1, "wheel", "rev/s"), SignalInfo(2, "out", "1"))
LOOPS = (LoopInfo(0, "tilt", "tilt", "out", ("tilt_kp", "tilt_ki", "tilt_kd"), "unstable",
                  "integral"),)


class FakeBoard:
    def __init__(self, *, rate_hz: float = 500.0, watchdog_ms: float = 250.0,
                 status_hz: float = 5.0, version: str = "1.0", start_time_us: int = 0,
                 start_frame: int = 0, lose_every: int = 0, drop_every: int = 0) -> None:
        self.codec = BoardCodec()
        self.rate_hz, self.watchdog_ms, self.status_hz = rate_hz, watchdog_ms, status_hz
        self.version = version
        self.params = {p.name: p for p in PARAMS}
        self.values = {p.name: p.value for p in PARAMS}
        self.stored = dict(self.values)
        self.out = bytearray()
        self.received: list = []  # (time s, host message) in order
        self.mute: dict[str, int] = {}  # verb -> replies to swallow
        self.lose_every, self.drop_every = lose_every, drop_every
        self.applied_sets = 0
        self.schedule: list = []  # (time s, callable(board, t))
        self._boot(0.0, start_time_us, start_frame, announce=False)

    def _boot(self, t: float, start_time_us: int = 0, start_frame: int = 0, *, announce=True):
        self.time0_s = t - start_time_us * 1e-6
        self.frame = start_frame
        self.motor, self.fault, self.mode, self.loop = "off", None, "off", None
        self.last_hb: float | None = None
        self.div = 0  # telemetry every div loop ticks; 0 = not streaming
        self.tick = 0
        self.next_tick_s = t
        self.drops = self.rx_err = 0
        self.last_seq = self.last_reply = None
        if announce:
            self._send(Event(self.time_us(t), "boot", (("reason", "reset"),)))

    def reboot(self, t: float) -> None:
        self._boot(t)

    def time_us(self, t: float) -> int:
        return int(round((t - self.time0_s) * 1e6)) % U32

    def _send(self, msg) -> None:
        self.out += BoardCodec.encode(msg)

    # ------------------------------------------------------------------ input

    def feed(self, data: bytes, t: float) -> None:
        for ev in self.codec.receive(data):
            self.received.append((t, ev))
            if isinstance(ev, KillByte):
                self._trip("kill", t)
            elif isinstance(ev, Heartbeat):
                self.last_hb = t
            elif isinstance(ev, BadFrame):
                self.rx_err += 1
            else:
                self._command(ev, t)

    def _command(self, msg, t: float) -> None:
        if msg.seq == self.last_seq and self.last_reply is not None:
            reply = self.last_reply  # PROTOCOL.md §4.2: resend, do not act again
        else:
            reply = self._act(msg, t)
            self.last_seq, self.last_reply = msg.seq, reply
        verb = type(msg).VERB
        if self.mute.get(verb):
            self.mute[verb] -= 1
            return
        self._send(reply)

    def _why(self, t: float) -> list[str]:
        why = []
        if self.fault:
            why.append("fault")
        if self.last_hb is None or (t - self.last_hb) * 1e3 > self.watchdog_ms:
            why.append("heartbeat")
        return why

    def _trip(self, cause: str, t: float) -> None:
        if self.motor != "tripped":
            self.motor, self.fault, self.mode = "tripped", cause, "off"
            self._send(Event(self.time_us(t), "trip", (("cause", cause),)))

    def _status_fields(self, t: float):
        hb_ms = 0 if self.last_hb is None else int((t - self.last_hb) * 1e3)
        return (("mode", self.mode), ("loop", self.loop or "-"), ("motor", self.motor),
                ("fault", self.fault or "none"), ("why", ",".join(self._why(t)) or "none"),
                ("drops", self.drops), ("rx_err", self.rx_err), ("hb_ms", hb_ms))

    def _act(self, msg, t: float):
        seq, kind = msg.seq, type(msg)
        if kind is Hello:
            if msg.version.split(".")[0] != self.version.split(".")[0]:
                return Err(seq, "version", f"board speaks {self.version}")
            info = BoardInfo(tuple(int(x) for x in self.version.split(".")), "fake-1",
                             "0.1", "bench", self.rate_hz, self.watchdog_ms, len(PARAMS),
                             len(SIGNALS), len(LOOPS), simulated=True)
            return Ok(seq, tuple(info.to_fields()))
        if kind in (DescribeParam, DescribeSignal, DescribeLoop):
            table = {DescribeParam: PARAMS, DescribeSignal: SIGNALS, DescribeLoop: LOOPS}[kind]
            if msg.index >= len(table):
                return Err(seq, "unknown_name", f"index {msg.index}")
            item = table[msg.index]
            if kind is DescribeParam:
                item = replace(item, value=self.values[item.name])
            return Ok(seq, tuple(item.to_fields()))
        if kind is Get:
            bad = [n for n in msg.names if n not in self.values]
            if bad:
                return Err(seq, "unknown_name", bad[0])
            return Ok(seq, tuple((n, format_value(self.values[n])) for n in msg.names))
        if kind is Set:
            for name, value in msg.values:
                p = self.params.get(name)
                if p is None:
                    return Err(seq, "unknown_name", name)
                if not p.writable:
                    return Err(seq, "readonly", name)
                if not p.admits(value):
                    return Err(seq, "range", f"{name} {p.minimum:g}..{p.maximum:g}")
            self.values.update(dict(msg.values))
            self.applied_sets += 1
            return Ok(seq, tuple((n, format_value(v)) for n, v in msg.values))
        if kind is Save:
            names = [p.name for p in PARAMS if p.writable]
            self.stored = {n: self.values[n] for n in names}
            image = " ".join(f"{n}={format_value(self.values[n])}" for n in names)
            return Ok(seq, (("count", len(names)), ("crc", "%04X" % crc16(image.encode()))))
        if kind is Restore:
            self.values.update(self.stored)
            return Ok(seq, (("count", len(self.stored)),))
        if kind is Arm:
            if self.motor == "running":
                return Err(seq, "state", "running")
            why = self._why(t)
            if why:
                return Err(seq, "interlock", ",".join(why))
            self.motor = "armed"
            return Ok(seq, (("motor", "armed"),))
        if kind is Disarm:
            if self.motor != "tripped":
                self.motor, self.mode = "off", "off"
            return Ok(seq, (("motor", self.motor),))
        if kind is Clear:
            if self.motor == "tripped":
                self.motor, self.fault = "off", None
                self._send(Event(self.time_us(t), "clear"))
            return Ok(seq, (("motor", self.motor),))
        if kind is Mode:
            if msg.name != "off" and self.motor not in ("armed", "running"):
                return Err(seq, "not_armed", self.motor)
            self.mode = msg.name
            if self.motor in ("armed", "running"):
                self.motor = "armed" if msg.name == "off" else "running"
            self._send(Event(self.time_us(t), "mode", (("mode", msg.name), ("loop", "-"))))
            return Ok(seq, (("mode", msg.name),) + tuple(msg.args))
        if kind is Stream:
            self.div = 0 if msg.rate_hz <= 0 else max(1, round(self.rate_hz / msg.rate_hz))
            return Ok(seq, (("rate_hz", self.rate_hz / self.div if self.div else 0),))
        if kind is Kill:
            self._trip("kill", t)
            return Ok(seq, (("motor", "tripped"),))
        if kind is StatusRequest:
            return Ok(seq, self._status_fields(t))
        return Err(seq, "unknown_verb")

    # ------------------------------------------------------------------ time

    def advance_to(self, t: float) -> None:
        period = 1.0 / self.rate_hz
        status_every = max(1, round(self.rate_hz / self.status_hz))
        while self.next_tick_s <= t:
            now = self.next_tick_s
            self.next_tick_s += period
            self.tick += 1
            for item in [s for s in self.schedule if s[0] <= now]:
                self.schedule.remove(item)
                item[1](self, now)
            if self.motor in ("armed", "running") and (
                    self.last_hb is None or (now - self.last_hb) * 1e3 > self.watchdog_ms):
                self._trip("watchdog", now)
            if self.div and self.tick % self.div == 0:
                self._telemetry(now)
            if self.tick % status_every == 0:
                self._send(Status(self.time_us(now), self._status_fields(now)))

    def _telemetry(self, now: float) -> None:
        frame, self.frame = self.frame, (self.frame + 1) % U32
        if self.drop_every and frame % self.drop_every == self.drop_every - 1:
            self.drops += 1  # the board's own drop: counted in status
            return
        if self.lose_every and frame % self.lose_every == self.lose_every - 1:
            return  # lost on the way: only the counter gap shows it
        tb = now - self.time0_s
        values = (2.0 * math.sin(2 * math.pi * 0.5 * tb), 0.1 * tb, 1.0 if self.motor == "running" else 0.0)
        self._send(Telemetry(frame, self.time_us(now), values))


class FakeClock:
    """Virtual seconds; advanced by FakePort.read only."""

    virtual = True

    def __init__(self) -> None:
        self.t = 0.0

    def now(self) -> float:
        return self.t

    def sleep(self, dt: float) -> None:
        end = self.t + dt
        while self.t < end:
            time.sleep(0.0005)


class FakePort:
    """pyserial-like port whose clock advances in ``step_s`` steps while the host reads."""

    def __init__(self, board: FakeBoard | None = None, *, timeout: float = 0.01,
                 step_s: float = 0.002) -> None:
        self.board = board or FakeBoard()
        self.clock = FakeClock()
        self.timeout, self.step_s = timeout, step_s
        self.port = "fake://board"
        self.is_open = True
        self.unplugged = False
        self.write_log: list = []  # (time s, bytes)
        self._lock = threading.Lock()

    @property
    def in_waiting(self) -> int:
        if self.unplugged:
            raise OSError(errno.EIO, "Input/output error")
        return len(self.board.out)

    def read(self, size: int = 1) -> bytes:
        if self.unplugged:
            raise serial.SerialException("device reports readiness to read but returned no data")
        with self._lock:
            end = self.clock.t + self.timeout
            while not self.board.out and self.clock.t < end - 1e-12:
                self.clock.t += self.step_s
                self.board.advance_to(self.clock.t)
            data = bytes(self.board.out[:size])
            del self.board.out[:size]
        return data

    def write(self, data: bytes) -> int:
        if self.unplugged:
            raise serial.SerialException(errno.EIO, "write failed: [Errno 5] Input/output error")
        with self._lock:
            self.write_log.append((self.clock.t, bytes(data)))
            self.board.feed(bytes(data), self.clock.t)
        return len(data)

    def cancel_read(self) -> None:
        pass

    def close(self) -> None:
        self.is_open = False


class PtyBoard:
    """A FakeBoard on the master side of a pseudo-terminal, in real time."""

    def __init__(self, board: FakeBoard | None = None) -> None:
        self.board = board or FakeBoard()
        self.master, self._slave = os.openpty()
        tty.setraw(self._slave)
        self.path = os.ttyname(self._slave)
        os.set_blocking(self.master, False)
        self._run = True
        self._t0 = time.monotonic()
        self._thread = threading.Thread(target=self._pump, daemon=True)
        self._thread.start()

    def _pump(self) -> None:
        while self._run:
            try:
                ready, _, _ = select.select([self.master], [], [], 0.002)
                now = time.monotonic() - self._t0
                if ready:
                    self.board.feed(os.read(self.master, 4096), now)
                self.board.advance_to(now)
                if self.board.out:
                    try:
                        n = os.write(self.master, bytes(self.board.out))
                    except BlockingIOError:
                        n = len(self.board.out)  # nobody reads: the board drops
                    del self.board.out[:n]
            except OSError:
                return

    def unplug(self) -> None:
        self._run = False
        self._thread.join(1.0)
        os.close(self.master)

    def close(self) -> None:
        if self._run:
            self.unplug()
        os.close(self._slave)


class SocketBoard:
    """A FakeBoard behind a TCP socket in real time, for ``socket://127.0.0.1:<port>``."""

    def __init__(self, board: FakeBoard | None = None) -> None:
        import socket

        self.board = board or FakeBoard()
        self._server = socket.create_server(("127.0.0.1", 0))
        self.url = "socket://127.0.0.1:%d" % self._server.getsockname()[1]
        self._run = True
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    def _serve(self) -> None:
        self._server.settimeout(5.0)
        try:
            conn, _ = self._server.accept()
        except OSError:
            return
        conn.setblocking(False)
        t0 = time.monotonic()
        with conn:
            while self._run:
                ready, _, _ = select.select([conn], [], [], 0.002)
                now = time.monotonic() - t0
                if ready:
                    try:
                        data = conn.recv(4096)
                    except OSError:
                        return
                    if not data:
                        return
                    self.board.feed(data, now)
                self.board.advance_to(now)
                if self.board.out:
                    try:
                        n = conn.send(bytes(self.board.out))
                    except BlockingIOError:
                        n = 0
                    except OSError:
                        return
                    del self.board.out[:n]

    def close(self) -> None:
        self._run = False
        self._thread.join(1.0)
        self._server.close()
