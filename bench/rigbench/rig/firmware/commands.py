"""The simulated board's command handlers (PROTOCOL.md §4.1, one method per verb).

``BoardCommands`` is mixed into ``SimBoard`` (rigbench.rig.firmware.board), which owns the state
these methods read and change. Each ``_on_<verb>`` returns the reply fields (a list of
(key, value)) or an (error code, text) tuple; ``SimBoard._command`` turns that into the one
reply the command gets.
"""

from __future__ import annotations

import math

from rigbench.rig.firmware.modes import ModeRefusal, applied_fields, parse_mode
from rigbench.rig.firmware.params import board_round
from rigbench.wire import messages as m
from rigbench.wire.describe import BoardInfo, SignalInfo, parse_version
from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.frame import MAX_BODY
from rigbench.wire.states import REFUSALS, next_state

__all__ = ["BoardCommands", "FW_VERSION", "STREAM_DIV_MAX"]

FW_VERSION = "0.1.0"
STREAM_DIV_MAX = (1 << 32) - 1   # the telemetry divider is a 32-bit counter (§6.1)


class BoardCommands:
    """Handlers of host commands; needs the attributes of ``SimBoard``."""

    def _on_hello(self, cmd):
        try:
            major, _minor = parse_version(cmd.version)
        except RemoteProtocolError:
            return "bad_args", "version major.minor"
        if major != m.PROTOCOL_VERSION[0]:
            return "version", "board speaks %d.%d" % m.PROTOCOL_VERSION
        info = BoardInfo(m.PROTOCOL_VERSION, self.rig.board, FW_VERSION, self.rig.rig,
                         self.rate_hz, self.rig.watchdog_ms, len(self.rig.params),
                         len(self.rig.signals), len(self.rig.loops), simulated=True)
        return info.to_fields()

    def _on_param(self, cmd):
        if cmd.index >= len(self.rig.params):
            return "unknown_name", f"no parameter {cmd.index}"
        return self.params.info(cmd.index).to_fields()

    def _on_signal(self, cmd):
        if cmd.index >= len(self.rig.signals):
            return "unknown_name", f"no signal {cmd.index}"
        s = self.rig.signals[cmd.index]
        return SignalInfo(cmd.index, s.name, s.unit).to_fields()

    def _on_loop(self, cmd):
        if cmd.index >= len(self.rig.loops):
            return "unknown_name", f"no loop {cmd.index}"
        return self.rig.loops[cmd.index].declared(cmd.index).to_fields()

    def _on_get(self, cmd):
        if len(set(cmd.names)) != len(cmd.names):      # the reply could not hold a key twice
            return "bad_args", "a name given twice"
        for name in cmd.names:
            if name not in self.params:
                return "unknown_name", f"no parameter {name}"
        return [(name, self.params.values[name]) for name in cmd.names]

    def _on_set(self, cmd):
        staged, self.staged = list(self.staged), []     # used or dropped: a group ends here
        if len({k for k, _ in cmd.values}) != len(cmd.values):
            return "bad_args", "a name given twice"
        if {k for k, _ in staged} & {k for k, _ in cmd.values}:
            return "bad_args", "a name staged and set again"
        refusal = self.params.check_set(staged + list(cmd.values), self._busy_gains())
        if refusal is not None:
            return refusal.code, refusal.text
        applied = [(name, board_round(v)) for name, v in cmd.values]
        if len(m.format_body(m.Ok(cmd.seq, tuple(applied)))) > MAX_BODY:
            return "bad_args", "reply would not fit in one line; set fewer"   # nothing changed
        self.params.apply(staged)                       # §5.5: all at once, between periods
        return self.params.apply(cmd.values)

    def _on_stage(self, cmd):
        """§5.5: check and keep assignments for the next ``set``; a refusal drops the group."""
        staged, self.staged = list(self.staged), []
        names = [k for k, _ in staged] + [k for k, _ in cmd.values]
        if len(set(names)) != len(names):
            return "bad_args", "a name staged twice"
        refusal = self.params.check_set(cmd.values, self._busy_gains())
        if refusal is not None:
            return refusal.code, refusal.text
        self.staged = staged + list(cmd.values)
        return [("staged", len(self.staged))]

    def _on_save(self, cmd):
        try:
            crc = self.nv.save(self.params.writable_image())
        except OSError as exc:
            return "storage", f"write failed: {exc.strerror or exc}"[:60]
        return [("count", len(self.params.writable_image())), ("crc", "%04X" % crc)]

    def _on_restore(self, cmd):
        if self.motor == "running":
            return "state", "motor running"
        image = self.nv.image or {}
        self.params.values.update(image)
        return [("count", len(image))]

    def _on_arm(self, cmd):
        code = REFUSALS.get((self.motor, "arm"))
        if code == "state":
            return code, "motor running"
        why = self.interlock_reasons()
        if why:
            return "interlock", ",".join(why)
        self._happen("arm")
        return [("motor", self.motor)]

    def _on_disarm(self, cmd):
        self._happen("disarm")
        return [("motor", self.motor)]

    def _on_clear(self, cmd):
        was = self.motor
        self._happen("clear")                           # §7.3: never starts the motor
        if was == "tripped":
            self.fault = None
            self._event("clear")
        return [("motor", self.motor)]

    def _on_kill(self, cmd):
        self._trip("kill")
        return [("motor", self.motor)]

    def _on_status(self, cmd):
        return self._status_fields()

    def _on_stream(self, cmd):
        rate = cmd.rate_hz
        if rate < 0.0:
            return "range", f"rate_hz 0..{self.rate_hz:g}"
        if rate == 0.0:
            self.stream_div = 0
            return [("rate_hz", 0)]
        # nearest loop rate / n (§6.1); below loop rate / STREAM_DIV_MAX the slowest (a rate
        # as small as 1e-310 makes the ratio overflow to inf, hence the min before floor)
        ratio = min(self.rate_hz / rate, STREAM_DIV_MAX)
        lo, hi = max(1, math.floor(ratio)), max(1, math.ceil(ratio))
        div = lo if abs(self.rate_hz / lo - rate) <= abs(self.rate_hz / hi - rate) else hi
        self.stream_div = div
        return [("rate_hz", self.rate_hz / div)]

    def _on_mode(self, cmd):
        run = parse_mode(cmd.name, cmd.args, self.rig, self.params.values,
                         has_body_push=hasattr(self.plant, "push"))
        if isinstance(run, ModeRefusal):
            return run.code, run.text
        happening = "stop" if run.name == "off" else "run"
        if next_state(self.motor, happening) is None:
            return REFUSALS.get((self.motor, happening), "state"), f"motor {self.motor}"
        if run.name == "inject" and self.mode.name != "hold":
            return "state", "inject starts from hold"
        if run.name == "off":
            self._happen("stop")
            if self.mode.name != "off":
                self._set_mode(run)
        else:
            self._happen("run")
            self._set_mode(run)
        return applied_fields(run)
