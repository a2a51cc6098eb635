"""What the host reads from a board's declarations for experiments and designs: the loop's
optional fields of PROTOCOL.md §5.4 when the board declares them, else the naming
conventions below. Every lookup is optional: when nothing is found the caller falls back
(asks for an explicit value, or skips a design and says why).

Declared (``loop`` reply, PROTOCOL.md §5.4), checked against the board's other
declarations (ValueError when a declared name is missing or in the wrong unit):
``setpoint`` (a signal in the measure's unit, or else a parameter), ``limit`` (a
parameter in the output's unit or one convertible to it), ``dfilt`` (a parameter in s or
ms), ``action`` (direct: e = measure − setpoint; reverse: e = setpoint − measure),
``rate`` (a signal in the measure's unit per second, or another unit of angular speed for
an angle).

Conventions, used only for what the loop does not declare (all met by the simulated
boards; a firmware author can follow them):
- ``<output>_limit``: symmetric bound of a loop's output signal (e.g. ``cmd_limit``).
- ``<loop>_dfilt_s``: time constant (s) of the loop's derivative filter.
- ``trip_<signal>`` (PROTOCOL.md §5.2): the board's trip limit on a signal.
- set-point signal of a loop: the first of ``<loop>_sp``, ``sp``, ``r``, ``setpoint`` that
  the board streams in the measure's unit.
- rate signal of a loop: a signal in the measure's unit per second (``deg`` → ``deg/s``).
- action: direct for a loop with ``plant=unstable`` (the balance loop, e = tilt − tilt
  set-point), reverse otherwise.
- wheel speed of a balance rig: the measure of the loop outside it (the loop whose output
  is its set-point signal) when that is a speed, else a signal named ``wheel`` in a speed
  unit.
- drive of a balance loop: ``speed`` when the loop's output is a speed (rev/s, rad/s,
  rpm), ``torque`` when it is a torque (N.m, mN.m).
- the loop to offer first (``primary_loop``): the innermost loop of a cascade, i.e. one
  whose output is no other loop's set-point signal (declared, else by the convention
  above), preferring one whose output is in a motor-drive unit (``DRIVE_UNITS``); else the
  first declared.
"""

from __future__ import annotations

from dataclasses import dataclass

from rigbench.base.units import si_factor
from rigbench.wire.describe import LOOP_OPTIONAL

__all__ = ["LoopSignals", "loop_signals", "param_value", "BoardView", "board_view",
           "loop_action", "LoopChoice", "primary_loop", "SPEED_UNITS", "TORQUE_UNITS",
           "DRIVE_UNITS"]

SPEED_UNITS = ("rev/s", "rad/s", "rpm")
TORQUE_UNITS = ("N.m", "mN.m")
# Units of a motor command: a torque, a speed (a speed-controlled drive), a voltage, a
# current or a duty cycle.
DRIVE_UNITS = (*TORQUE_UNITS, *SPEED_UNITS, "V", "A", "%")
_SETPOINT_NAMES = ("{loop}_sp", "sp", "r", "setpoint")
# Units of one quantity, convertible into each other by their SI factors (rigbench.base.units).
_KINDS = (("deg", "rad"), ("deg/s", "rad/s", "rev/s", "rpm"), TORQUE_UNITS, ("s", "ms"))
_ANGLE_RATES = {"deg": _KINDS[1], "rad": _KINDS[1]}


def _factor(unit: str, to: str) -> float | None:
    """Factor taking a value in ``unit`` to ``to``; None when they measure different things."""
    if unit == to:
        return 1.0
    if any(unit in kind and to in kind for kind in _KINDS):
        return si_factor(unit) / si_factor(to)
    return None


@dataclass(frozen=True)
class BoardView:
    """What a board declared, kept with a result so designs need no live link."""

    board: str
    rig: str
    rate_hz: float
    params: dict                    # name -> ParamInfo (values as read at the start)
    loops: dict                     # name -> LoopInfo
    units: dict                     # signal name -> unit

    @property
    def dt_s(self) -> float:
        return 1.0 / self.rate_hz

    def value(self, name: str) -> float | None:
        p = self.params.get(name)
        return None if p is None else float(p.value)


def board_view(link) -> BoardView:
    info = link.info
    return BoardView(info.board, info.rig, float(info.rate_hz), dict(link.params),
                     dict(link.loops), {s.name: s.unit for s in link.signals})


@dataclass(frozen=True)
class LoopSignals:
    """A loop's declaration plus what its optional fields or the conventions above found."""

    name: str
    measure: str
    output: str
    gains: tuple[str, str, str]
    plant: str                      # stable | integrating | unstable
    relay: str                      # output | integral
    measure_unit: str
    output_unit: str
    gain_units: tuple[str, str, str]
    setpoint: str | None            # set-point signal
    rate: str | None                # d(measure)/dt signal (a gyro)
    wheel: str | None               # wheel speed signal (balance rigs)
    relay_signal: str | None        # relay state signal (+1/−1)
    output_limit: float | None      # in the output's unit
    dfilt_s: float | None
    trip: float | None              # trip_<measure>
    drive: str | None               # speed | torque for a balance loop
    action: str = "reverse"         # direct: e = measure − setpoint; reverse: the opposite
    setpoint_param: str | None = None   # parameter holding the set-point, when declared
    declared: tuple[str, ...] = ()  # the optional loop fields the board declared

    @property
    def signals(self) -> tuple[str, ...]:
        return tuple(s for s in (self.measure, self.output, self.setpoint, self.rate,
                                 self.wheel, self.relay_signal) if s)

    @property
    def direct_acting(self) -> bool:
        return self.action == "direct"


def param_value(link, name: str) -> float | None:
    p = link.params.get(name)
    return None if p is None else float(p.value)


def loop_action(lp) -> str:
    """The loop's declared action, else the convention (direct for an unstable plant)."""
    return lp.action or ("direct" if lp.plant == "unstable" else "reverse")


def _declared_param(link, lp, key: str, unit: str) -> float | None:
    """Value, in ``unit``, of the parameter the loop declares under ``key``."""
    name = getattr(lp, key)
    p = link.params.get(name)
    if p is None:
        raise ValueError(f"loop {lp.name!r} declares {key}={name}, which is not a parameter "
                         "of the board")
    f = _factor(p.unit, unit)
    if f is None:
        raise ValueError(f"loop {lp.name!r} declares {key}={name} in {p.unit}, which does "
                         f"not convert to {unit}")
    return float(p.value) * f


def _setpoint(link, lp, units: dict, mu: str) -> tuple[str | None, str | None]:
    """(set-point signal, set-point parameter) of the loop."""
    name = lp.setpoint
    if name is None:
        return _conventional_setpoint(lp, units, mu), None
    if name in units:
        if units[name] != mu or name == lp.measure:
            raise ValueError(f"loop {lp.name!r} declares setpoint={name}, a signal in "
                             f"{units[name]}; it must be another signal in the measure's "
                             f"unit {mu}")
        return name, None
    if name in link.params:
        return None, name
    raise ValueError(f"loop {lp.name!r} declares setpoint={name}, which is neither a signal "
                     "nor a parameter of the board")


def _conventional_setpoint(lp, units: dict, mu: str | None) -> str | None:
    return next((c for c in (n.format(loop=lp.name) for n in _SETPOINT_NAMES)
                 if units.get(c) == mu and c != lp.measure), None)


def _rate(lp, units: dict, mu: str) -> str | None:
    name = lp.rate
    if name is None:
        return next((n for n, u in units.items() if u == f"{mu}/s" and n != lp.output), None)
    if units.get(name) is None:
        raise ValueError(f"loop {lp.name!r} declares rate={name}, which the board does not "
                         "stream")
    if units[name] != f"{mu}/s" and units[name] not in _ANGLE_RATES.get(mu, ()):
        raise ValueError(f"loop {lp.name!r} declares rate={name} in {units[name]}, which is "
                         f"not a rate of its measure's unit {mu}")
    return name


def _wheel(link, lp, units: dict, setpoint: str | None) -> str | None:
    outer = [o for o in link.loops.values()
             if setpoint is not None and o.output == setpoint and o.name != lp.name]
    if outer and units.get(outer[0].measure) in SPEED_UNITS:
        return outer[0].measure
    return "wheel" if units.get("wheel") in SPEED_UNITS and lp.measure != "wheel" else None


def loop_signals(link, loop: str) -> LoopSignals:
    """Look up ``loop`` on the link's board; ValueError naming the loops if unknown, or
    saying which declared name the board lacks."""
    try:
        lp = link.loops[loop]
    except KeyError:
        raise ValueError(f"the board has no loop {loop!r}; it has: "
                         f"{', '.join(link.loops) or 'none'}") from None
    units = {s.name: s.unit for s in link.signals}
    mu, ou = units.get(lp.measure), units.get(lp.output)
    if mu is None or ou is None:
        raise ValueError(f"loop {loop!r} names signals the board does not stream")
    setpoint, setpoint_param = _setpoint(link, lp, units, mu)
    rate = _rate(lp, units, mu)
    limit = (_declared_param(link, lp, "limit", ou) if lp.limit
             else param_value(link, f"{lp.output}_limit"))
    dfilt = (_declared_param(link, lp, "dfilt", "s") if lp.dfilt
             else param_value(link, f"{loop}_dfilt_s"))
    drive = None
    if lp.plant == "unstable":
        drive = "speed" if ou in SPEED_UNITS else "torque" if ou in TORQUE_UNITS else None
    gain_units = tuple(link.params[g].unit if g in link.params else "" for g in lp.gains)
    declared = tuple(k for k in LOOP_OPTIONAL if getattr(lp, k) is not None)
    return LoopSignals(
        lp.name, lp.measure, lp.output, tuple(lp.gains), lp.plant, lp.relay, mu, ou,
        gain_units, setpoint, rate, _wheel(link, lp, units, setpoint),
        "relay" if "relay" in units else None, limit, dfilt,
        param_value(link, f"trip_{lp.measure}"), drive, loop_action(lp), setpoint_param,
        declared)


@dataclass(frozen=True)
class LoopChoice:
    """The loop to offer first on a board, and why."""

    name: str | None                # None: the board declares no loop
    candidates: tuple[str, ...]     # the loops that fit the rule equally well (board order)
    reason: str                     # in words, for a hint or an error message

    @property
    def ambiguous(self) -> bool:
        """More than one loop fits: ``name`` is only the first declared of them."""
        return len(self.candidates) > 1


def primary_loop(loops: dict, units: dict) -> LoopChoice:
    """The loop a user tunes first: the innermost loop of a cascade.

    ``loops``: name -> LoopInfo in the board's order; ``units``: signal name -> unit. A loop
    is inner when its output is no other loop's set-point signal (the declared
    ``setpoint=``, else the convention of the module docstring). Among inner loops, those
    whose output is in a motor-drive unit (``DRIVE_UNITS``) come first. When no loop is
    inner (a declaration loop), the first declared loop.
    """
    names = list(loops)
    if not names:
        return LoopChoice(None, (), "the board declares no loop")
    if len(names) == 1:
        return LoopChoice(names[0], (names[0],), "the board declares one loop")
    fed: set[str] = set()
    for lp in loops.values():
        sp = lp.setpoint if lp.setpoint is not None else \
            _conventional_setpoint(lp, units, units.get(lp.measure))
        if sp is not None:
            fed.add(sp)
    inner = [n for n in names if loops[n].output not in fed]
    if not inner:
        return LoopChoice(names[0], tuple(names), "every loop's output is another loop's "
                          f"set-point; the first declared, {names[0]}")
    driving = [n for n in inner if units.get(loops[n].output) in DRIVE_UNITS]
    pick = tuple(driving or inner)
    first = loops[pick[0]]
    drives = (f"drives the motor ({units.get(first.output)})" if driving
              else "is no other loop's set-point")
    if len(pick) == 1:
        return LoopChoice(pick[0], pick, f"{pick[0]} is the innermost loop, its output "
                          f"{first.output} {drives}")
    return LoopChoice(pick[0], pick, f"{', '.join(pick)} are all innermost loops "
                      f"(outputs feed no other loop's set-point); the first declared, {pick[0]}")
