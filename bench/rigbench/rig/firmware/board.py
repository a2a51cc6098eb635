"""The simulated board: a rig's firmware behaviour on the board side of the codec.

One ``SimBoard`` is one board (command handlers in rigbench.rig.firmware.commands, loops in
rigbench.rig.firmware.control, parameters and storage in rigbench.rig.firmware.params, mode
fields and the transmit buffer in rigbench.rig.firmware.modes). Host bytes go in with
``receive(data)``; ``step()`` runs one loop period (plant, sensors, safety, controllers,
telemetry, status); ``output()`` drains the transmit buffer. Nothing here reads a clock
or starts a thread: time is the count of loop periods (``time_s``), so a board is
deterministic for a given plant seed and input.

What it implements (PROTOCOL.md section beside the code):
- §4 every command gets exactly one reply; a command repeated with the sequence number and
  the body text of the last answered one gets that reply again and is not acted on (§4.2).
  A repeated number with another body is taken as a new command (a new host session may
  restart its numbering); a ``hello`` is never a resend and clears that memory. Every ``err`` text passes through ``refusal_text`` (the one
  place that makes it legal in a frame body, §2).
- §5 discovery from the rig's declaration (rigbench.rig.firmware.boards); atomic ``set``; ``save`` /
  ``restore`` through ``NvStore``; the board boots with its stored values.
- §6 telemetry at loop rate / n with a 32-bit frame counter and µs clock, status at 5 Hz,
  events (boot, mode, trip, clear, done); a bounded transmit buffer that drops telemetry.
- §7 kill byte acted on at once; watchdog; the motor-off interlock with the state table of
  rigbench.wire.states (TRANSITIONS / REFUSALS); trip limits from ``trip_<signal>``.
- §8 modes off / hold / relay / open / inject, run by ``LoopEngine``.
- One-sample computational delay: the command computed in period k reaches the plant in
  period k+1; a trip or kill zeroes the pending command at once.
"""

from __future__ import annotations

import math

import numpy as np

from rigbench.rig.firmware.boards import RigDef, rig_def
from rigbench.rig.firmware.commands import FW_VERSION, BoardCommands
from rigbench.rig.firmware.control import LoopEngine, ModeRun
from rigbench.rig.firmware.modes import TxBuffer
from rigbench.rig.firmware.params import NvStore, ParamTable
from rigbench.wire import messages as m
from rigbench.wire.codec import BoardCodec
from rigbench.wire.errors import LocalProtocolError
from rigbench.wire.frame import BadFrame, KillByte
from rigbench.wire.states import REFUSALS, next_state

__all__ = ["SimBoard", "make_board", "refusal_text", "FW_VERSION"]

STATUS_HZ = 5.0
U32 = 1 << 32
_MESSAGE_ERRORS = {"bad_number": "bad_args", "bad_field": "bad_args",
                   "unknown_verb": "unknown_verb"}
REPLY_TOO_LONG = "reply would not fit in one line; "
ERR_TEXT_MAX = 80      # characters of an ``err`` text; the whole reply stays under 193 (§2)
_ERR_TEXT_SWAP = str.maketrans({"|": "/", "@": "?", "'": None})


def refusal_text(text: str, *, max_chars: int = ERR_TEXT_MAX) -> str:
    """The text of an ``err`` reply as it may go in a frame body (PROTOCOL.md §2): ``|``
    becomes ``/``, ``@`` and anything outside printable ASCII ``?``, quotes go, runs of
    blanks become one space, at most ``max_chars`` characters."""
    text = text.translate(_ERR_TEXT_SWAP)
    text = "".join(c if " " <= c <= "~" else "?" for c in " ".join(text.split()))
    return text[:max_chars].rstrip()


class SimBoard(BoardCommands):
    """A simulated board running ``rig`` on ``plant`` (see the module docstring).

    ``state_path``: JSON file of the non-volatile storage (None: in memory).
    ``clock_start_us``: the µs clock at boot (to exercise the 32-bit wrap).
    ``hand_tilt_deg``: where the simulated hand holds a balance rig while not running.
    """

    def __init__(self, rig: RigDef, plant, *, state_path: str | None = None,
                 tx_capacity_bytes: int = 4096, clock_start_us: int = 0,
                 hand_tilt_deg: float = 0.0) -> None:
        self.rig = rig
        self.plant = plant
        self.rate_hz = rig.rate_hz
        self.dt_s = 1.0 / rig.rate_hz
        if abs(plant.dt_s - self.dt_s) > 1e-12:
            raise ValueError("the plant must step at the board's loop period")
        self.watchdog_s = rig.watchdog_ms / 1000.0
        self._watchdog_us = round(rig.watchdog_ms * 1000)
        self.nv = NvStore(rig.rig, rig.params, state_path)
        self.params = ParamTable(rig.params)
        self.instruments = rig.make_instruments(self.dt_s)
        self.engine = LoopEngine(rig, self.dt_s)
        self.tx = TxBuffer(tx_capacity_bytes)
        self.clock_start_us = int(clock_start_us) % U32
        self.hand_tilt_deg = hand_tilt_deg
        self._status_every = max(1, round(self.rate_hz / STATUS_HZ))
        names = {s.name for s in rig.signals}
        self._trip_params = [(p.name, p.name[5:]) for p in rig.params   # §5.2 trip_<signal>
                             if p.name.startswith("trip_") and p.name[5:] in names]
        self._arm_params = [(p.name, p.name[4:]) for p in rig.params     # §7.3 arm_<signal>
                            if p.name.startswith("arm_") and p.name[4:] in names]
        self._steps = 0
        self.boots = 0
        self._boot("power")

    # ------------------------------------------------------------------ time, state

    @property
    def time_s(self) -> float:
        """Simulated seconds since this board object was made (continues across reboots)."""
        return self._steps * self.dt_s

    @property
    def time_us(self) -> int:
        """The board's 32-bit microsecond clock (restarts at boot, wraps at 2³²)."""
        n = self._steps - self._boot_step
        return (self.clock_start_us + round(n * 1e6 / self.rate_hz)) % U32

    def reboot(self, reason: str = "reset") -> None:
        """Restart the firmware: live state lost, stored parameters kept, plant untouched."""
        self._boot(reason)

    def _boot(self, reason: str) -> None:
        self.boots += 1
        self._boot_step = self._steps
        self.codec = BoardCodec()
        self.params.load_defaults()
        image = self.nv.image
        if image:
            self.params.values.update(image)
        self.instruments.reset()
        self.engine.reset()
        self.tx.clear()
        self.motor = "off"
        self.fault: str | None = None
        self.mode = ModeRun()
        self.signals = {s.name: 0.0 for s in self.rig.signals}
        self.drops = 0
        self.rx_err = 0
        self.frame = 0
        self.stream_div = 0
        self.last_hb_s: float | None = None
        self._hb_ref_us = self.time_us        # µs clock at the last heartbeat (or at boot)
        self._last_cmd = None
        self.staged: list = []  # assignments kept by ``stage`` for the next ``set`` (§5.5)
        self._last_body = ""
        self._last_reply = b""
        self._pending_si = 0.0
        self._event("boot", reason=reason)

    # ------------------------------------------------------------------ byte interface

    def receive(self, data: bytes) -> None:
        """Host → board bytes; commands are answered and the kill byte acted on in order."""
        for ev, body in self.codec.receive_with_bodies(data):
            kind = type(ev)
            if kind is KillByte:
                self._trip("kill")                      # §7.1: at once, mid-line too
            elif kind is m.Heartbeat:
                self.last_hb_s = self.time_s            # §7.2
                self._hb_ref_us = self.time_us
            elif kind is BadFrame:
                self.rx_err += 1
                if ev.code in _MESSAGE_ERRORS and ev.raw.split(b" ", 1)[0] == b"kill":
                    self._trip("kill")                  # §7.1: a kill that fails to parse stops
                self._answer_bad(ev)
            else:
                self._command(ev, body)

    def output(self, max_bytes: int | None = None) -> bytes:
        """Drain up to ``max_bytes`` (all by default) of the transmit buffer."""
        return self.tx.take(max_bytes)

    def step(self, *, firmware: bool = True) -> None:
        """One loop period. ``firmware=False``: the firmware is stalled (plant only, the
        last command held, no control, no output)."""
        if self.rig.held_upright and self.motor in ("off", "armed"):
            self._hold_body()
        self.plant.step(self._pending_si)
        self._steps += 1
        if not firmware:
            return
        sig = self.signals
        sig.update(self.instruments.read(self.plant.sensors(), self.params.values))
        self._safety()
        if self.motor == "running":
            self._run_mode()
        if self.motor != "running":
            self.engine.idle(sig, self.params.values)
        cmd = sig[self.rig.command] if self.motor == "running" else 0.0
        self._pending_si = cmd * self.rig.command_si
        n = self._steps - self._boot_step
        if self.stream_div and n % self.stream_div == 0:
            self._telemetry()
        if n % self._status_every == 0:
            self.tx.put(self._encode(m.Status(self.time_us, self._status_fields())), "status")

    # ------------------------------------------------------------------ loop period parts

    def _hold_body(self) -> None:
        """The simulated hand: body at ``hand_tilt_deg``, still; stopping the body leaves
        the wheel's absolute speed (body rate + wheel speed relative to it) unchanged."""
        tr = self.plant.truth()
        self.plant.set_state(tilt_rad=math.radians(self.hand_tilt_deg), rate_rad_s=0.0,
                             wheel_rad_s=tr["wheel_rad_s"] + tr["rate_rad_s"])

    def _safety(self) -> None:
        if self.motor not in ("armed", "running"):
            return
        if not self._heartbeat_ok():
            self._trip("watchdog")
            return
        vals = self.params.values
        for param, signal in self._trip_params:
            v = self.signals[signal]
            if abs(v) > vals[param]:
                self._trip(f"{signal}_limit", v)
                return

    def _run_mode(self) -> None:
        out = self.engine.run(self.signals, self.params.values, self.mode)
        if out.bound_loop is not None:
            self._trip("relay_bound", out.bound_value)
            return
        run = self.mode
        if run.end_s is not None and self.time_s >= run.end_s - 1e-9:
            name = run.name
            self._event("done", mode=name)
            if name == "open":
                self._happen("stop")
            else:
                self._set_mode(ModeRun(name="hold"))

    def _telemetry(self) -> None:
        values = tuple(self.signals[s.name] for s in self.rig.signals)
        try:
            frame = self._encode(m.Telemetry(self.frame, self.time_us, values))
        except LocalProtocolError:                   # §3: a value not finite cannot be sent
            frame = None
        self.frame = (self.frame + 1) % U32          # counts dropped frames too (§6.1)
        if frame is None:
            return
        if not self.tx.put(frame, "telemetry"):
            self.drops += 1

    # ------------------------------------------------------------------ motor and modes

    def _happen(self, happening: str) -> str | None:
        """Apply a happening of the state table; return the refusal code or None."""
        nxt = next_state(self.motor, happening)
        if nxt is None:
            return REFUSALS.get((self.motor, happening), "state")
        was, self.motor = self.motor, nxt
        if nxt != "running" and self.mode.name != "off":
            self._set_mode(ModeRun())
        if was != "running" and nxt == "running":
            self.engine.reset()
        if nxt != "running":
            self._pending_si = 0.0
        return None

    def _set_mode(self, run: ModeRun) -> None:
        old = self.mode
        overrides = old.name == "open" or (
            old.name == "relay" and self.rig.loop(old.loop).relay == "output")
        if overrides and not (run.loop == old.loop and run.name in ("open", "relay")):
            self.engine.leave_override(old.loop)
        if run.name == "relay":
            lp = self.rig.loop(run.loop)
            sp = self.engine._setpoint(lp, self.signals, self.params.values)
            self.engine.start_relay(lp.name, self.engine.pids[lp.name].error(
                sp, self.signals[lp.measure]))
        if run.name in ("open", "inject"):
            run.end_s = self.time_s + run.time_s
        if run.name == "inject" and run.at == "body":
            self.plant.push(run.amp, run.time_s)
        self.mode = run
        self._event("mode", mode=run.name, loop=run.loop or "-")

    def _trip(self, cause: str, value: float | None = None) -> None:
        if self.motor != "tripped":                   # the first cause stays latched
            self.fault = cause
            fields = {"cause": cause}
            if value is not None:
                fields["value"] = float(value)
            self._event("trip", **fields)
        self._happen("trip")
        self._pending_si = 0.0
        if self._last_cmd is not None:
            # §4.2: a resend of a command answered before the trip must not report the state
            # from before it (e.g. a retried `clear` saying motor=off after a kill)
            self._last_reply = self._encode(
                m.Err(self._last_cmd.seq, "state", "tripped since this command; ask status"))

    def _since_hb_us(self) -> int:
        """µs since the last heartbeat (since boot before the first), on the board's 32-bit
        clock as a board without big integers computes it; held at 2³¹ so it never wraps
        back to a fresh-looking value (the C library does the same)."""
        since = (self.time_us - self._hb_ref_us) % U32
        if since > 1 << 31:
            self._hb_ref_us = (self.time_us - (1 << 31)) % U32
            since = 1 << 31
        return since

    def _heartbeat_ok(self) -> bool:
        return self.last_hb_s is not None and self._since_hb_us() <= self._watchdog_us

    def interlock_reasons(self) -> list[str]:
        """Conditions that would refuse an ``arm`` now (PROTOCOL.md §7.3), in order: fault,
        heartbeat, then ``<signal>`` for every ``arm_<signal>`` parameter in declaration
        order (|signal| above it), then gains."""
        why = []
        vals = self.params.values
        if self.fault is not None:
            why.append("fault")
        if not self._heartbeat_ok():
            why.append("heartbeat")
        for name, signal in self._arm_params:
            if abs(self.signals[signal]) > vals[name]:
                why.append(signal)
        if not all(self.params.in_range(g) for lp in self.rig.loops for g in lp.gains):
            why.append("gains")
        return why

    def _status_fields(self) -> list[tuple[str, object]]:
        why = self.interlock_reasons()
        return [("mode", self.mode.name), ("loop", self.mode.loop or "-"),
                ("motor", self.motor), ("fault", self.fault or "none"),
                ("why", ",".join(why) or "none"), ("drops", self.drops),
                ("rx_err", self.rx_err), ("hb_ms", (self._since_hb_us() // 500 + 1) // 2)]

    def _busy_gains(self) -> frozenset[str]:
        if self.mode.name in ("relay", "open", "inject"):
            return frozenset(self.rig.loop(self.mode.loop).gains)
        return frozenset()

    # ------------------------------------------------------------------ replies

    @staticmethod
    def _encode(msg) -> bytes:
        return BoardCodec.encode(msg)

    def _event(self, kind: str, **fields) -> None:
        self.tx.put(self._encode(m.Event(self.time_us, kind, tuple(fields.items()))), "event")

    def _answer_bad(self, ev: BadFrame) -> None:
        """§3: a command whose body was unreadable gets ``err`` when its seq was readable."""
        reply_code = _MESSAGE_ERRORS.get(ev.code)
        if reply_code is None:
            return
        tokens = ev.raw.decode("ascii", "replace").split(" ")
        if len(tokens) < 2 or not tokens[1].isdigit() or int(tokens[1]) >= m.SEQ_MODULO:
            return
        if reply_code == "bad_args" and tokens[0] not in m.COMMANDS:
            return
        self.tx.put(self._encode(m.Err(int(tokens[1]), reply_code, refusal_text(ev.detail))),
                    "reply")

    def _command(self, cmd: m.Command, body: str | None = None) -> None:
        """Answer one command. ``body``: its text as sent; None (a caller with only the
        parsed command) compares the canonical text instead."""
        body = m.format_body(cmd) if body is None else body
        if self._last_cmd is not None and cmd.seq == self._last_cmd.seq \
                and body == self._last_body and cmd.VERB != "hello":   # §4.2: resend
            self.tx.put(self._last_reply, "reply")
            return
        if cmd.VERB not in ("stage", "set"):
            self.staged = []  # §5.5: any other command drops a staged group
        handler = getattr(self, "_on_" + cmd.VERB)
        result = handler(cmd)
        if isinstance(result, tuple):
            reply = m.Err(cmd.seq, result[0], refusal_text(result[1]))
        else:
            reply = m.Ok(cmd.seq, tuple(result))
        try:
            data = self._encode(reply)
        except LocalProtocolError:      # e.g. a `get` of many long names (§2: 200 bytes)
            data = self._encode(m.Err(cmd.seq, "bad_args", REPLY_TOO_LONG + "ask for fewer"))
        if cmd.VERB == "hello":          # §4.2: a hello clears the resend memory
            self._last_cmd, self._last_body, self._last_reply = None, "", b""
        else:
            self._last_cmd, self._last_body, self._last_reply = cmd, body, data
        self.tx.put(data, "reply")


def make_board(rig: str = "balance", *, drive: str = "speed", num=(1.0,), den=(1.0, 1.0),
               delay_s: float = 0.0, plant_kind: str | None = None, seed: int = 0,
               noise: float = 1.0,
               rate_hz: float = 500.0, state_path: str | None = None, **board_kw) -> SimBoard:
    """A board for ``rig`` with its plant seeded by ``seed`` (see ``SimBoard`` for the rest)."""
    rd = rig_def(rig, drive=drive, num=num, den=den, delay_s=delay_s, rate_hz=rate_hz,
                 plant_kind=plant_kind)
    plant = rd.make_plant(np.random.default_rng(seed), noise, rate_hz)
    return SimBoard(rd, plant, state_path=state_path, **board_kw)
