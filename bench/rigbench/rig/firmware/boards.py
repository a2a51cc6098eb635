"""What each simulated board declares (PROTOCOL.md §5) and how it reads its rig.

A ``RigDef`` is data: the board's parameters (name, unit, range, boot default, writable),
its telemetry signals, its loops (outer loop first: each loop's set-point is a parameter or
the output signal of the loop outside it), plus three small pieces of code a real firmware
would have: the plant it drives (simulation only), its instruments (sensor readings to
signals in declared units) and the factor from its command unit to the plant's SI input.

Rigs (our own invented demo rigs; numbers in docs/METHODS.md §6 and in rigbench.rig.plants.balance /
rigbench.rig.plants.wheel):

- ``balance`` (speed drive, the default): tilt loop wheel-speed command (rev/s) from tilt
  (deg), open-loop unstable, relay on the integral channel; outer ``trim`` loop: tilt
  set-point (deg) from wheel speed (rev/s), integrating (with a right-half-plane zero at
  +a, docs/METHODS.md §4), relay on the output. Boot gains: tilt kp 0.64, ki 9.9, kd 0; trim kp
  0.2, ki 0.05 (docs/METHODS.md §6; the trim loop is reverse-acting, e = wheel_sp − wheel
  (``action=reverse``), the sign that balances, checked in simulation: tests/rig/test_board_loops.py).
- ``balance-torque``: the same rig with a torque drive: tilt loop motor torque (N.m) from
  tilt. Boot gains kp 0.078 N.m/deg, ki 0.14 N.m/(deg·s), kd 0.005 N.m·s/deg: poles of
  Jp·s³ + kd·s² + (kp − mgl)·s + ki at −3 and ω 15 rad/s, ζ 0.7 (our own design).
- ``wheel``: motor and flywheel speed loop, armature volts from wheel speed, stable. The
  wheel speed is the encoder's count difference through a first-order filter of
  ``wheel_tc_s`` (default 5 ms, our own choice: boards filter encoder speed).
- ``plant``: a linear transfer function with dead time; loop ``main``, r/y/u.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from rigbench.rig.plants.catalog import ComplementaryFilter, make_balance, make_plant, make_wheel
from rigbench.wire.describe import LoopInfo

__all__ = ["ParamDef", "SignalDef", "LoopDef", "RigDef", "RIGS", "rig_def"]

_DEG = math.pi / 180.0
_REV = 2.0 * math.pi


@dataclass(frozen=True)
class ParamDef:
    """A parameter the board declares: value range, boot default, writable or not."""

    name: str
    unit: str
    minimum: float
    maximum: float
    default: float
    writable: bool = True


@dataclass(frozen=True)
class SignalDef:
    name: str
    unit: str


@dataclass(frozen=True)
class LoopDef:
    """One PID loop (PROTOCOL.md §5.4).

    ``direct``: e = setpoint − measure (True) or e = measure − setpoint (False, for a plant
    whose gain is negative); on the wire that is ``action=reverse`` and ``action=direct``
    respectively (the trade's words: a direct-acting controller's output rises with the
    measure). ``setpoint``: a parameter name, or the output signal of the loop outside this
    one. ``setpoint_signal``: the telemetry signal showing the set-point in use, if any.
    ``limit``: parameter holding the symmetric output limit. ``dfilt``: parameter holding
    the derivative filter time constant (s). ``rate``: a signal that measures d(measure)/dt
    directly (a gyro), used for the derivative term instead of a difference of samples.
    """

    name: str
    measure: str
    output: str
    gains: tuple[str, str, str]
    plant: str
    relay: str
    direct: bool
    setpoint: str
    limit: str
    dfilt: str
    setpoint_signal: str | None = None
    rate: str | None = None

    @property
    def action(self) -> str:
        return "reverse" if self.direct else "direct"

    def declared(self, index: int) -> LoopInfo:
        """What the board's ``loop`` reply says about this loop, optional fields included:
        the set-point as seen in telemetry (else the parameter holding it)."""
        return LoopInfo(index, self.name, self.measure, self.output, self.gains, self.plant,
                        self.relay, setpoint=self.setpoint_signal or self.setpoint,
                        limit=self.limit, dfilt=self.dfilt, action=self.action, rate=self.rate)


class Instruments:
    """Sensor readings (SI) to measured signals in the board's declared units."""

    def reset(self) -> None:
        pass

    def read(self, sensors: dict[str, float], params: dict[str, float]) -> dict[str, float]:
        raise NotImplementedError


class BalanceInstruments(Instruments):
    """Tilt from the complementary filter (as a real board computes it), gyro rate, wheel."""

    def __init__(self, dt_s: float) -> None:
        self.dt_s = dt_s
        self._tc_s = 0.0
        self._filter: ComplementaryFilter | None = None

    def reset(self) -> None:
        self._filter = None

    def read(self, sensors, params):
        tc = params["tilt_tc_s"]
        if self._filter is None or tc != self._tc_s:
            old = self._filter
            self._filter = ComplementaryFilter(tc, self.dt_s)
            if old is not None:  # a new time constant keeps the estimate
                self._filter.reset(old.tilt_rad)
            self._tc_s = tc
        tilt = self._filter.update(sensors["accel_tilt_rad"], sensors["gyro_rad_s"])
        return {"tilt": tilt / _DEG, "rate": sensors["gyro_rad_s"] / _DEG,
                "wheel": sensors["wheel_rad_s"] / _REV}


class WheelInstruments(Instruments):
    """Wheel speed through the board's first-order filter, as real boards filter the
    encoder's count difference (one count per period is 0.12 rev/s at 4096 counts and
    500 Hz): w[k] = w[k−1] + a·(raw[k] − w[k−1]), a = h/(wheel_tc_s + h) (backward Euler,
    the complementary filter's form); ``wheel_tc_s`` = 0 passes the raw difference."""

    def __init__(self, dt_s: float) -> None:
        self.dt_s = dt_s
        self._wheel: float | None = None

    def reset(self) -> None:
        self._wheel = None

    def read(self, sensors, params):
        raw = sensors["wheel_rad_s"] / _REV
        a = self.dt_s / (params["wheel_tc_s"] + self.dt_s)
        self._wheel = raw if self._wheel is None else self._wheel + a * (raw - self._wheel)
        return {"wheel": self._wheel, "current": sensors["current_A"]}


class PlantInstruments(Instruments):
    def read(self, sensors, params):
        return {"y": sensors["y"]}


@dataclass(frozen=True)
class RigDef:
    """Everything a simulated board declares, and the hooks to its plant.

    ``make_plant(rng, noise, rate_hz, **rig_options)`` builds the plant;
    ``command_si``: SI plant input per unit of the command signal ``command``;
    ``held_upright``: a simulated hand holds the body upright (tilt ``hand_tilt_deg``) while
    the motor is off or armed, as a person holds a balance rig until it runs; it lets go
    when a mode starts and after a trip (the rig then falls to its stop), and lifts the rig
    again when the motor is off or armed once more.
    """

    rig: str
    board: str
    params: tuple[ParamDef, ...]
    signals: tuple[SignalDef, ...]
    loops: tuple[LoopDef, ...]
    command: str
    command_si: float
    make_plant: Callable
    make_instruments: Callable[[float], Instruments]
    rate_hz: float = 500.0
    watchdog_ms: float = 500.0
    held_upright: bool = False

    def __post_init__(self) -> None:
        names = [p.name for p in self.params]
        if len(set(names)) != len(names):
            raise ValueError(f"{self.rig}: parameter names repeat")
        sig = [s.name for s in self.signals]
        for p in self.params:
            if not p.minimum <= p.default <= p.maximum:
                raise ValueError(f"{self.rig}: {p.name} default outside its range")
        for lp in self.loops:
            for g in (*lp.gains, lp.limit, lp.dfilt):
                if g not in names:
                    raise ValueError(f"{self.rig}: loop {lp.name} names unknown param {g}")
            for s in (lp.measure, lp.output, lp.setpoint_signal, lp.rate):
                if s is not None and s not in sig:
                    raise ValueError(f"{self.rig}: loop {lp.name} names unknown signal {s}")
            if lp.setpoint not in names and lp.setpoint not in sig:
                raise ValueError(f"{self.rig}: loop {lp.name} set-point {lp.setpoint} unknown")
        if self.command not in sig:
            raise ValueError(f"{self.rig}: command signal {self.command} not declared")

    def param(self, name: str) -> ParamDef:
        for p in self.params:
            if p.name == name:
                return p
        raise KeyError(name)

    def loop(self, name: str) -> LoopDef:
        for lp in self.loops:
            if lp.name == name:
                return lp
        raise KeyError(name)


# ----------------------------------------------------------------------------- balance

def _balance_params(drive: str) -> tuple[ParamDef, ...]:
    P = ParamDef
    if drive == "speed":
        tilt = (P("tilt_kp", "rev/s/deg", 0, 10, 0.64), P("tilt_ki", "rev/s/deg/s", 0, 100, 9.9),
                P("tilt_kd", "rev/deg", 0, 1, 0.0))
        cmd_limit = P("cmd_limit", "rev/s", 0, 50, 50)
    else:
        tilt = (P("tilt_kp", "N.m/deg", 0, 1, 0.078), P("tilt_ki", "N.m/deg/s", 0, 5, 0.14),
                P("tilt_kd", "N.m.s/deg", 0, 0.1, 0.005))
        cmd_limit = P("cmd_limit", "N.m", 0, 0.3, 0.3)
    return tilt + (
        P("tilt_dfilt_s", "s", 0, 0.1, 0.005),
        P("trim_kp", "deg.s/rev", 0, 5, 0.2),
        P("trim_ki", "deg/rev", 0, 5, 0.05),
        P("trim_kd", "deg.s2/rev", 0, 1, 0.0),
        P("trim_dfilt_s", "s", 0, 1, 0.05),
        P("wheel_sp", "rev/s", -20, 20, 0.0),
        cmd_limit,
        P("sp_limit", "deg", 0, 10, 5),
        P("tilt_tc_s", "s", 0.05, 5, 0.5),
        P("trip_tilt", "deg", 1, 30, 20),
        P("trip_wheel", "rev/s", 1, 60, 45),
        P("arm_tilt", "deg", 0.1, 10, 3),
        P("arm_wheel", "rev/s", 0.1, 20, 1),
        P("torque_limit", "N.m", 0.3, 0.3, 0.3, writable=False),
    )


def _balance(drive: str) -> RigDef:
    cmd_unit = "rev/s" if drive == "speed" else "N.m"
    loops = (
        LoopDef("trim", measure="wheel", output="sp", gains=("trim_kp", "trim_ki", "trim_kd"),
                plant="integrating", relay="output", direct=True, setpoint="wheel_sp",
                limit="sp_limit", dfilt="trim_dfilt_s"),
        LoopDef("tilt", measure="tilt", output="cmd", gains=("tilt_kp", "tilt_ki", "tilt_kd"),
                plant="unstable", relay="integral", direct=False, setpoint="sp",
                limit="cmd_limit", dfilt="tilt_dfilt_s", setpoint_signal="sp", rate="rate"),
    )
    signals = (SignalDef("tilt", "deg"), SignalDef("rate", "deg/s"), SignalDef("wheel", "rev/s"),
               SignalDef("cmd", cmd_unit), SignalDef("sp", "deg"), SignalDef("relay", "1"))

    def plant(rng, noise, rate_hz):
        return make_balance(drive, rng, noise, rate_hz)

    return RigDef(
        rig="balance" if drive == "speed" else "balance-torque",
        board="sim-balance-1" if drive == "speed" else "sim-balance-torque-1",
        params=_balance_params(drive), signals=signals, loops=loops, command="cmd",
        command_si=_REV if drive == "speed" else 1.0, make_plant=plant,
        make_instruments=BalanceInstruments, held_upright=True)


# ----------------------------------------------------------------------------- wheel

def _wheel() -> RigDef:
    P = ParamDef
    params = (
        P("speed_kp", "V.s/rev", 0, 10, 0.5), P("speed_ki", "V/rev", 0, 50, 2.0),
        P("speed_kd", "V.s2/rev", 0, 1, 0.0), P("speed_dfilt_s", "s", 0, 0.1, 0.005),
        P("speed_sp", "rev/s", -70, 70, 0.0), P("cmd_limit", "V", 0, 12, 12),
        P("trip_wheel", "rev/s", 1, 100, 90), P("arm_wheel", "rev/s", 0.1, 100, 2),
        P("supply_v", "V", 12, 12, 12, writable=False),
        P("wheel_tc_s", "s", 0, 0.05, 0.005),   # wheel-speed filter (WheelInstruments)
    )
    loops = (LoopDef("speed", measure="wheel", output="cmd",
                     gains=("speed_kp", "speed_ki", "speed_kd"), plant="stable", relay="output",
                     direct=True, setpoint="speed_sp", limit="cmd_limit", dfilt="speed_dfilt_s",
                     setpoint_signal="sp"),)
    signals = (SignalDef("wheel", "rev/s"), SignalDef("sp", "rev/s"), SignalDef("cmd", "V"),
               SignalDef("current", "A"), SignalDef("relay", "1"))

    def plant(rng, noise, rate_hz):
        return make_wheel(rng, noise, rate_hz)

    return RigDef(rig="wheel", board="sim-wheel-1", params=params, signals=signals,
                  loops=loops, command="cmd", command_si=1.0, make_plant=plant,
                  make_instruments=WheelInstruments)


# ----------------------------------------------------------------------------- plant

def plant_kind_of(den) -> str:
    """'unstable' with a root of den in the right half-plane, else 'integrating' with a root
    at 0, else 'stable' (tolerance 1e-9 of the largest root's size)."""
    roots = np.roots(np.asarray(den, dtype=float))
    if not len(roots):
        return "stable"
    tol = 1e-9 * max(1.0, float(np.max(np.abs(roots))))
    if np.any(roots.real > tol):
        return "unstable"
    if np.any(np.abs(roots) <= max(tol, 1e-6)):
        return "integrating"
    return "stable"


def _plant(num=(1.0,), den=(1.0, 1.0), delay_s=0.0, plant_kind=None) -> RigDef:
    P = ParamDef
    kind = plant_kind or plant_kind_of(den)
    if kind not in ("stable", "integrating", "unstable"):
        raise ValueError(f"plant kind must be stable, integrating or unstable, got {kind!r}")
    params = (
        P("main_kp", "1", 0, 1000, 0.5), P("main_ki", "1/s", 0, 1000, 0.25),
        P("main_kd", "s", 0, 1000, 0.0), P("main_dfilt_s", "s", 0, 10, 0.01),
        P("main_sp", "1", -1000, 1000, 0.0), P("u_limit", "1", 0, 1e6, 100),
        P("trip_y", "1", 0, 1e6, 1000),
    )
    loops = (LoopDef("main", measure="y", output="u", gains=("main_kp", "main_ki", "main_kd"),
                     plant=kind, relay="integral" if kind == "unstable" else "output",
                     direct=True, setpoint="main_sp",
                     limit="u_limit", dfilt="main_dfilt_s", setpoint_signal="r"),)
    signals = (SignalDef("r", "1"), SignalDef("y", "1"), SignalDef("u", "1"),
               SignalDef("relay", "1"))
    num, den, delay_s = tuple(num), tuple(den), float(delay_s)

    def plant(rng, noise, rate_hz):
        return make_plant(num, den, delay_s, rng, noise, rate_hz)

    return RigDef(rig="plant", board="sim-plant-1", params=params, signals=signals,
                  loops=loops, command="u", command_si=1.0, make_plant=plant,
                  make_instruments=lambda dt_s: PlantInstruments())


RIGS = ("balance", "wheel", "plant")


def rig_def(rig: str = "balance", *, drive: str = "speed", num=(1.0,), den=(1.0, 1.0),
            delay_s: float = 0.0, rate_hz: float = 500.0,
            plant_kind: str | None = None) -> RigDef:
    """The declaration of rig ``rig``; ``drive`` for balance, ``num/den/delay_s`` for plant."""
    if rig == "balance":
        if drive not in ("speed", "torque"):
            raise ValueError(f"drive must be speed or torque, got {drive!r}")
        rd = _balance(drive)
    elif rig == "wheel":
        rd = _wheel()
    elif rig == "plant":
        rd = _plant(num, den, delay_s, plant_kind)
    else:
        raise ValueError(f"unknown rig {rig!r}; known: {', '.join(RIGS)}")
    if not (math.isfinite(rate_hz) and rate_hz > 0):
        raise ValueError(f"rate_hz must be finite and > 0, got {rate_hz!r}")
    return replace(rd, rate_hz=float(rate_hz))
