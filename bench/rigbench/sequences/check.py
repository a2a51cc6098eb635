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

from rigbench.profiles.model import Problem, check_against_board, param_problems
from rigbench.sequences.steps import (
    PushStep, RelayStep, RepeatStep, Sequence, SetStep, SweepStep, WaitStep,
)
from rigbench.wire.describe import LoopInfo, ParamInfo

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
                out += param_problems(params, name, [value], f"{s.where}.{name}", s.line,
                                      named=True)
        elif isinstance(s, RepeatStep):
            out += param_problems(params, s.param, s.values, f"{s.where}.for.param", s.line,
                                  named=True)
            _steps(s.steps, params, loops, signals, info, out)
        elif isinstance(s, (RelayStep, SweepStep)) and s.loop not in loops:
            out.append(Problem(f"{s.where}.loop", f"the board has no loop {s.loop!r}; it has: "
                                                  f"{', '.join(loops) or 'none'}", s.line))
        elif isinstance(s, WaitStep) and s.settled is not None \
                and s.settled.signal not in signals:
            out.append(Problem(f"{s.where}.settled.signal", f"the board has no signal "
                               f"{s.settled.signal!r}; it has: {', '.join(signals)}", s.line))


def _guards(guards, field: str, line, params, signals, out: list[Problem]) -> None:
    if guards.wheel_fraction is not None and "trip_wheel" not in params:
        out.append(Problem(f"{field}.wheel_fraction", "the board declares no trip_wheel "
                                                      "parameter to take a fraction of", line))
    if guards.tilt_deg is not None and "tilt" not in signals:
        out.append(Problem(f"{field}.tilt_deg", "the board has no tilt signal; this guard "
                                                "cannot act", line, "warning"))
