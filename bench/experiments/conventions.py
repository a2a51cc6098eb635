"""What the host reads from a board's declarations beyond PROTOCOL.md §5, by naming
convention, for experiments and designs. Every lookup is optional: when a name is absent
the caller falls back (asks for an explicit value, or skips a design and says why).

Conventions (all met by the simulated boards; a firmware author can follow them):
- ``<output>_limit``: symmetric bound of a loop's output signal (e.g. ``cmd_limit``).
- ``<loop>_dfilt_s``: time constant (s) of the loop's derivative filter.
- ``trip_<signal>`` (PROTOCOL.md §5.2): the board's trip limit on a signal.
- set-point signal of a loop: the first of ``<loop>_sp``, ``sp``, ``r``, ``setpoint`` that
  the board streams in the measure's unit.
- rate signal of a loop: a signal in the measure's unit per second (``deg`` → ``deg/s``).
- wheel speed of a balance rig: a signal named ``wheel`` in a speed unit.
- drive of a balance loop: ``speed`` when the loop's output is a speed (rev/s, rad/s,
  rpm), ``torque`` when it is a torque (N.m, mN.m).

Must not import: textual, bench.ui, bench.commands, control.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["LoopSignals", "loop_signals", "param_value", "BoardView", "board_view",
           "SPEED_UNITS", "TORQUE_UNITS"]

SPEED_UNITS = ("rev/s", "rad/s", "rpm")
TORQUE_UNITS = ("N.m", "mN.m")


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
    """A loop's declaration plus what the conventions above found on this board."""

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
    output_limit: float | None
    dfilt_s: float | None
    trip: float | None              # trip_<measure>
    drive: str | None               # speed | torque for a balance loop

    @property
    def signals(self) -> tuple[str, ...]:
        return tuple(s for s in (self.measure, self.output, self.setpoint, self.rate,
                                 self.wheel, self.relay_signal) if s)


def param_value(link, name: str) -> float | None:
    p = link.params.get(name)
    return None if p is None else float(p.value)


def loop_signals(link, loop: str) -> LoopSignals:
    """Look up ``loop`` on the link's board; ValueError naming the loops if unknown."""
    try:
        lp = link.loops[loop]
    except KeyError:
        raise ValueError(f"the board has no loop {loop!r}; it has: "
                         f"{', '.join(link.loops) or 'none'}") from None
    units = {s.name: s.unit for s in link.signals}
    mu, ou = units.get(lp.measure), units.get(lp.output)
    if mu is None or ou is None:
        raise ValueError(f"loop {loop!r} names signals the board does not stream")
    setpoint = next((c for c in (f"{loop}_sp", "sp", "r", "setpoint")
                     if units.get(c) == mu and c != lp.measure), None)
    rate = next((n for n, u in units.items() if u == f"{mu}/s" and n != lp.output), None)
    wheel = "wheel" if units.get("wheel") in SPEED_UNITS and lp.measure != "wheel" else None
    drive = None
    if lp.plant == "unstable":
        drive = "speed" if ou in SPEED_UNITS else "torque" if ou in TORQUE_UNITS else None
    gain_units = tuple(link.params[g].unit if g in link.params else "" for g in lp.gains)
    return LoopSignals(
        lp.name, lp.measure, lp.output, tuple(lp.gains), lp.plant, lp.relay, mu, ou,
        gain_units, setpoint, rate, wheel, "relay" if "relay" in units else None,
        param_value(link, f"{lp.output}_limit"), param_value(link, f"{loop}_dfilt_s"),
        param_value(link, f"trip_{lp.measure}"), drive)
