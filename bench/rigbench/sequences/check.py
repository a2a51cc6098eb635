"""A loaded sequence checked against what a board declares, before anything runs.

``check_sequence_against_board(sequence, params, loops, signals, info=None)`` lists every
problem a runner would otherwise meet mid-run: pushed profiles that do not fit
(``check_against_board``), ``set`` and ``repeat`` parameters unknown, read-only or out of the
declared range, loops and signals the board does not have, guards that need a parameter the
board lacks, and a sequence written for another rig kind. Problems carry the sequence file's
line and the step's field path (``steps[3].relay.loop``).
"""

from __future__ import annotations

from typing import Iterable, Mapping

from rigbench.profiles.model import Problem, check_against_board
from rigbench.sequences.steps import (
    PushStep, RelayStep, RepeatStep, Sequence, SetStep, Step, SweepStep, WaitStep,
)
from rigbench.wire.describe import LoopInfo, ParamInfo, format_value
from rigbench.base.yamlload import near_hint

__all__ = ["check_sequence_against_board"]


def check_sequence_against_board(sequence: Sequence, params: Mapping[str, ParamInfo],
                                 loops: Mapping[str, LoopInfo], signals: Iterable[str], *,
                                 info=None) -> list[Problem]:
    """Problems (errors and warnings) of ``sequence`` on a board declaring these; ``signals``
    are the names of its telemetry signals, ``info`` its BoardInfo (for the rig kind)."""
    signals = [getattr(s, "name", s) for s in signals]
    out: list[Problem] = []
    if info is not None and sequence.rig is not None and sequence.rig != info.rig:
        out.append(Problem("rig", f"the sequence is for a {sequence.rig!r} rig; the board is a "
                                  f"{info.rig!r} rig"))
    _guards(sequence.guards, "guards", None, params, signals, out)
    _steps(sequence.steps, params, loops, signals, info, out)
    return out


def _steps(steps, params, loops, signals, info, out: list[Problem]) -> None:
    for s in steps:
        if s.guards is not None:
            _guards(s.guards, f"{s.where}.guards", s.line, params, signals, out)
        if isinstance(s, PushStep):
            for p in check_against_board(s.profile, params, loops, info=info):
                out.append(Problem(f"{s.where}.profile", f"{s.path.name}: {p.format()}"
                                   + (f" (profile line {p.line})" if p.line else ""), s.line,
                                   p.severity))
        elif isinstance(s, SetStep):
            for name, value in s.values.items():
                _param(s, f"{s.where}.{name}", name, [value], params, out)
        elif isinstance(s, RepeatStep):
            _param(s, f"{s.where}.for.param", s.param, s.values, params, out)
            _steps(s.steps, params, loops, signals, info, out)
        elif isinstance(s, (RelayStep, SweepStep)) and s.loop not in loops:
            out.append(Problem(f"{s.where}.loop", f"the board has no loop {s.loop!r}; it has: "
                                                  f"{', '.join(loops) or 'none'}", s.line))
        elif isinstance(s, WaitStep) and s.settled is not None \
                and s.settled.signal not in signals:
            out.append(Problem(f"{s.where}.settled.signal", f"the board has no signal "
                               f"{s.settled.signal!r}; it has: {', '.join(signals)}", s.line))


def _param(step: Step, field: str, name: str, values, params, out: list[Problem]) -> None:
    p = params.get(name)
    if p is None:
        out.append(Problem(field, f"the board has no parameter {name!r}"
                                  f"{near_hint(name, params)}", step.line))
        return
    if not p.writable:
        out.append(Problem(field, f"{name} is read-only on this board", step.line))
    for v in values:
        if not p.admits(v):
            out.append(Problem(field, f"{name} = {format_value(v)} is outside the board's range "
                                      f"{format_value(p.minimum)}..{format_value(p.maximum)} "
                                      f"{p.unit}", step.line))


def _guards(guards, field: str, line, params, signals, out: list[Problem]) -> None:
    if guards.wheel_fraction is not None and "trip_wheel" not in params:
        out.append(Problem(f"{field}.wheel_fraction", "the board declares no trip_wheel "
                                                      "parameter to take a fraction of", line))
    if guards.tilt_deg is not None and "tilt" not in signals:
        out.append(Problem(f"{field}.tilt_deg", "the board has no tilt signal; this guard "
                                                "cannot act", line, "warning"))
