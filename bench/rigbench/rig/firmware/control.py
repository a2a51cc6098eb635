"""The simulated board's control code: PID, relay, and the cascade of loops under a mode.

PID (PROTOCOL.md §5.4), parallel form, discrete at the loop period dt::

    u = kp·e + I + D,   I[k] = I[k−1] + ki·e_i·dt,   D = kd·s·ẏf

- ``e`` is the board's error: e = sp − y for a direct loop, e = y − sp for a loop whose
  plant gain is negative (the balance tilt loop), so u always has the sign of e.
- Derivative on the measurement only (no kick on set-point steps): s = −1 for a direct loop,
  +1 for a reverse one; ẏf is dy/dt (sample difference, or a rate sensor such as the gyro)
  through a first-order low-pass with time constant ``dfilt_s`` (0: unfiltered).
- The integral is stored as the sum of ki·e·dt, so a change of ki does not bump the output.
- Anti-windup by **clamping** (conditional integration): in a step where the integrand
  pushes the output beyond a limit, the integral moves only as far as brings the output to
  that limit (never further out; it is not pulled back either). The output is clipped to
  ±limit. (Back-calculation was not chosen: it needs a tracking
  time constant that would be one more parameter to declare.)
- ``e_i`` is e plus an offset: the relay of a ``relay=integral`` loop (docs/METHODS.md §4).

Relay (PROTOCOL.md §8.1): the state r (+1/−1) flips to +1 when e > hyst and to −1 when
e < −hyst. ``relay=output``: u = bias + amp·r. ``relay=integral``: the loop stays closed
and bias + amp·r is added to the error fed to the integral only.

Leaving a relay (``output`` style) or an open-loop run for closed loop is bumpless: the
integral is set so the first closed-loop output equals the last one.
"""

from __future__ import annotations

from dataclasses import dataclass

from rigbench.rig.firmware.boards import LoopDef, RigDef

__all__ = ["Pid", "ModeRun", "LoopEngine", "EngineOut"]


class Pid:
    """Parallel PID with filtered derivative on the measurement and clamping anti-windup."""

    def __init__(self, direct: bool, dt_s: float) -> None:
        self.direct = direct
        self.dt_s = dt_s
        self.reset()

    def reset(self) -> None:
        self.integral = 0.0
        self._dy = 0.0
        self._y_last: float | None = None
        self._bumpless: float | None = None

    def error(self, setpoint: float, measure: float) -> float:
        return setpoint - measure if self.direct else measure - setpoint

    def track(self, u_last: float) -> None:
        """Make the next update continue from output ``u_last`` (bumpless transfer)."""
        self._bumpless = u_last

    def update(self, setpoint: float, measure: float, kp: float, ki: float, kd: float,
               dfilt_s: float, limit: float, *, rate: float | None = None,
               integral_offset: float = 0.0) -> float:
        dt = self.dt_s
        e = self.error(setpoint, measure)
        if rate is None:
            raw = 0.0 if self._y_last is None else (measure - self._y_last) / dt
        else:
            raw = rate
        self._y_last = measure
        a = dfilt_s / (dfilt_s + dt) if dfilt_s > 0.0 else 0.0
        self._dy = a * self._dy + (1.0 - a) * raw
        d = kd * (-self._dy if self.direct else self._dy)
        p = kp * e
        if self._bumpless is not None:
            self.integral = self._bumpless - p - d
            self._bumpless = None
        step = ki * (e + integral_offset) * dt
        i_new = self.integral + step
        u = p + i_new + d
        # clamping: the integral moves outward only as far as brings u to its limit
        if u > limit and step > 0.0:
            i_new = max(self.integral, limit - p - d)
        elif u < -limit and step < 0.0:
            i_new = min(self.integral, -limit - p - d)
        self.integral = i_new
        u = p + i_new + d
        return limit if u > limit else (-limit if u < -limit else u)


@dataclass
class ModeRun:
    """The mode the board is in (PROTOCOL.md §8) and its fields, in the loop's units."""

    name: str = "off"
    loop: str | None = None
    amp: float = 0.0
    hyst: float = 0.0
    bias: float = 0.0
    bound: float | None = None
    out: float = 0.0
    shape: str = "pulse"
    at: str = "setpoint"
    time_s: float = 0.0
    end_s: float | None = None     # board time at which a timed mode ends


@dataclass(frozen=True)
class EngineOut:
    """One loop period's result: the command (declared units) and a relay-bound breach."""

    command: float
    bound_loop: str | None = None
    bound_value: float = 0.0


class LoopEngine:
    """Runs the rig's loops, outer first, under the present mode; writes output signals."""

    def __init__(self, rig: RigDef, dt_s: float) -> None:
        self.rig = rig
        self.dt_s = dt_s
        self.pids = {lp.name: Pid(lp.direct, dt_s) for lp in rig.loops}
        self.relay_state = {lp.name: 1.0 for lp in rig.loops}
        self.last_out = {lp.name: 0.0 for lp in rig.loops}

    def reset(self) -> None:
        for pid in self.pids.values():
            pid.reset()
        for name in self.last_out:
            self.last_out[name] = 0.0
            self.relay_state[name] = 1.0

    def start_relay(self, loop: str, error: float) -> None:
        """A relay starts on the side the error is on (+1 when inside the hysteresis)."""
        self.relay_state[loop] = -1.0 if error < 0.0 else 1.0

    def leave_override(self, loop: str) -> None:
        """Closed loop again after an output override: continue from the last output."""
        self.pids[loop].track(self.last_out[loop])

    def idle(self, signals: dict[str, float], params: dict[str, float]) -> None:
        """Motor not running: outputs zero, set-points shown, PIDs reset."""
        for lp in self.rig.loops:
            sp = self._setpoint(lp, signals, params)
            if lp.setpoint_signal:
                signals[lp.setpoint_signal] = sp
            signals[lp.output] = 0.0
        signals["relay"] = 0.0
        self.reset()

    def _setpoint(self, lp: LoopDef, signals, params) -> float:
        return params[lp.setpoint] if lp.setpoint in params else signals[lp.setpoint]

    def run(self, signals: dict[str, float], params: dict[str, float], mode: ModeRun) -> EngineOut:
        """One period in a running mode; fills the loops' output and set-point signals."""
        bound_loop, bound_value = None, 0.0
        relay_shown = 0.0
        for lp in self.rig.loops:
            pid = self.pids[lp.name]
            mine = mode.loop == lp.name
            sp = self._setpoint(lp, signals, params)
            if mine and mode.name == "inject" and mode.at == "setpoint":
                sp += mode.amp
            if lp.setpoint_signal:
                signals[lp.setpoint_signal] = sp
            y = signals[lp.measure]
            kp, ki, kd = (params[g] for g in lp.gains)
            limit = params[lp.limit]
            rate = signals[lp.rate] if lp.rate else None
            offset = 0.0
            override = None
            if mine and mode.name == "relay":
                e = pid.error(sp, y)
                r = self.relay_state[lp.name]
                if e > mode.hyst:
                    r = 1.0
                elif e < -mode.hyst:
                    r = -1.0
                self.relay_state[lp.name] = r
                relay_shown = r
                if mode.bound is not None and abs(y - sp) > mode.bound:
                    bound_loop, bound_value = lp.name, abs(y - sp)
                if lp.relay == "integral":
                    offset = mode.bias + mode.amp * r
                else:
                    override = mode.bias + mode.amp * r
            elif mine and mode.name == "open":
                override = mode.out
            u = pid.update(sp, y, kp, ki, kd, params[lp.dfilt], limit, rate=rate,
                           integral_offset=offset)
            if override is not None:
                u = limit if override > limit else (-limit if override < -limit else override)
            if mine and mode.name == "inject" and mode.at == "output":
                u = min(max(u + mode.amp, -limit), limit)
            self.last_out[lp.name] = u
            signals[lp.output] = u
        signals["relay"] = relay_shown
        return EngineOut(signals[self.rig.command], bound_loop, bound_value)
