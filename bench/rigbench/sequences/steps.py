"""Steps of a scripted test sequence as typed dataclasses, and the unrolling of repeats.

The step vocabulary (sequences/README.md) is fixed: ``push``, ``arm``, ``hold``, ``wait``,
``relay``, ``sweep``, ``record``, ``set``, ``check``, ``disarm``, ``clear`` and
``repeat``. Reading
and checking files is rigbench.sequences.file; running a sequence is the runner's business.
``expand`` gives the steps in run order with repeats unrolled, values substituted and the
guards in force filled in: what a dry run prints and what a runner executes.

Units: seconds for every ``*_s``; tilt in degrees (``tilt_deg``); amplitudes, hysteresis,
bounds and thresholds in the board's declared units of the loop's signals (PROTOCOL.md §8).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from rigbench.profiles.model import Profile
from rigbench.wire.describe import format_value

__all__ = ["METRICS", "OPS", "GUARD_KEYS", "MAX_STEPS", "Guards", "Settled", "Step", "PushStep",
           "ArmStep", "HoldStep", "DisarmStep", "ClearStep", "WaitStep", "RelayStep", "SweepStep",
           "RecordStep", "SetStep", "CheckStep", "RepeatStep", "Sequence", "expand",
           "count_steps", "describe_step"]

MAX_STEPS = 10000  # after unrolling repeats
OPS = ("<", "<=", ">", ">=")
GUARD_KEYS = ("tilt_deg", "wheel_fraction", "stale_s")

# Metrics a ``check`` may test: the latest relay or sweep step's result, or the whole run.
METRICS = {
    "relay.period_s": "oscillation period of the latest relay step (s)",
    "relay.amplitude": "oscillation amplitude (half peak-to-peak) of the measure",
    "relay.cycles": "whole cycles the latest relay step recorded",
    "relay.period_scatter": "cycle-to-cycle spread of the period, as a fraction",
    "relay.ku": "describing-function ultimate gain estimate (stable loops)",
    "relay.gain": "gain of the measured frequency-response point",
    "relay.phase_deg": "phase of the measured frequency-response point (deg)",
    "sweep.iae_mean": "mean integrated absolute error over the latest sweep's pushes",
    "sweep.iae_max": "largest integrated absolute error of the latest sweep",
    "sweep.peak_mean": "mean peak |error| after a push, in the measure's unit",
    "sweep.peak_max": "largest peak |error| after a push",
    "sweep.settling_s_mean": "mean settling time into the band (s)",
    "sweep.settling_s_max": "longest settling time (s)",
    "sweep.fell": "pushes of the latest sweep after which the rig fell",
    "fell": "times the rig fell (tilt trip) since the sequence started",
    "trips": "trips of any cause since the sequence started",
}


@dataclass(frozen=True)
class Guards:
    """Abort limits: |tilt| in degrees, |wheel| as a fraction of the board's ``trip_wheel``,
    telemetry older than ``stale_s`` seconds. None: not set at this level."""

    tilt_deg: float | None = None
    wheel_fraction: float | None = None
    stale_s: float | None = None

    def merged(self, inner: "Guards | None") -> "Guards":
        """These guards with ``inner``'s set values taking precedence."""
        if inner is None:
            return self
        return Guards(*(getattr(inner, k) if getattr(inner, k) is not None else getattr(self, k)
                        for k in GUARD_KEYS))


@dataclass(frozen=True)
class Settled:
    """|signal| below ``below`` (board units) for ``for_s`` seconds."""

    signal: str
    below: float
    for_s: float


@dataclass(frozen=True, kw_only=True)
class Step:
    """Common to every step: ``index`` is its position ("3", or "5.2" inside repeat 5),
    ``line`` its line; ``bindings`` the repeat values in force after ``expand``."""

    kind: str = ""
    index: str
    line: int
    where: str = field(default="", compare=False)  # field path in the file, for messages
    timeout_s: float | None = None
    guards: Guards | None = None
    bindings: tuple[tuple[str, float], ...] = ()

    def label(self) -> str:
        with_ = ", ".join(f"{k}={format_value(v)}" for k, v in self.bindings)
        return f"step {self.index} {self.kind}" + (f" ({with_})" if with_ else "")


@dataclass(frozen=True, kw_only=True)
class PushStep(Step):
    kind: str = "push"
    path: Path
    profile: Profile
    persist: bool = False


@dataclass(frozen=True, kw_only=True)
class ArmStep(Step):
    kind: str = "arm"


@dataclass(frozen=True, kw_only=True)
class HoldStep(Step):
    kind: str = "hold"


@dataclass(frozen=True, kw_only=True)
class DisarmStep(Step):
    kind: str = "disarm"


@dataclass(frozen=True, kw_only=True)
class ClearStep(Step):
    """Clear a latched fault (PROTOCOL.md §7.3): the motor goes to off, never starts."""

    kind: str = "clear"


@dataclass(frozen=True, kw_only=True)
class WaitStep(Step):
    """Wait ``seconds``, or until ``settled`` holds (then ``timeout_s`` is required)."""

    kind: str = "wait"
    seconds: float | None = None
    settled: Settled | None = None


@dataclass(frozen=True, kw_only=True)
class RelayStep(Step):
    """Relay test on ``loop`` (PROTOCOL.md §8.1) until ``cycles`` whole cycles or ``max_s``."""

    kind: str = "relay"
    loop: str
    amplitude: float
    hysteresis: float
    bound: float
    max_s: float
    bias: float = 0.0
    cycles: int = 6


@dataclass(frozen=True, kw_only=True)
class SweepStep(Step):
    """Injections (PROTOCOL.md §8) from hold: each amplitude ``repeats`` times, ``spacing_s``
    apart, each lasting ``time_s``."""

    kind: str = "sweep"
    loop: str
    shape: str  # pulse | step
    at: str  # setpoint | output | body
    amplitudes: tuple[float, ...]
    repeats: int
    spacing_s: float
    time_s: float


@dataclass(frozen=True, kw_only=True)
class RecordStep(Step):
    kind: str = "record"
    seconds: float
    name: str


@dataclass(frozen=True, kw_only=True)
class SetStep(Step):
    """One atomic ``set`` of board parameters (board units)."""

    kind: str = "set"
    values: dict[str, float]
    # raise trip_*/arm_* limits while the motor is armed (refused without it)
    loosen_limits: bool = False


@dataclass(frozen=True, kw_only=True)
class CheckStep(Step):
    kind: str = "check"
    metric: str
    op: str
    value: float

    def passes(self, measured: float) -> bool:
        return {"<": measured < self.value, "<=": measured <= self.value,
                ">": measured > self.value, ">=": measured >= self.value}[self.op]


@dataclass(frozen=True, kw_only=True)
class RepeatStep(Step):
    """Run ``steps`` once per value, after setting ``param`` to it."""

    kind: str = "repeat"
    param: str
    values: tuple[float, ...]
    steps: tuple[Step, ...]


@dataclass(frozen=True)
class Sequence:
    name: str
    path: Path
    project: Path
    guards: Guards
    on_abort: str  # kill | disarm; either way the sequence ends with the motor off
    steps: tuple[Step, ...]
    port: str | None = None
    rig: str | None = None
    notes: str | None = None
    demo: bool = False


def count_steps(steps) -> int:
    n = 0
    for s in steps:
        n += len(s.values) * (1 + count_steps(s.steps)) if isinstance(s, RepeatStep) else 1
        if n > MAX_STEPS:
            break
    return n


def expand(sequence: Sequence) -> list[Step]:
    """Every step in run order, repeats unrolled: each value becomes a ``set`` of the repeat's
    parameter followed by the repeat's steps, with ``{param}`` in recording names replaced by
    the value (7 significant digits), ``bindings`` filled in, and ``guards`` the guards in
    force for the step (the sequence's, overridden by enclosing repeats' and the step's)."""
    out: list[Step] = []
    _expand(sequence.steps, (), sequence.guards, out)
    return out


def _expand(steps, bindings, guards: Guards, out: list) -> None:
    for s in steps:
        g = guards.merged(s.guards)
        if not isinstance(s, RepeatStep):
            extra = {}
            if isinstance(s, RecordStep):
                names = dict(bindings)
                extra["name"] = re.sub(r"\{([^}]*)\}", lambda mt: format_value(names[mt.group(1)]),
                                       s.name)
            out.append(replace(s, bindings=bindings, guards=g, **extra))
            continue
        for value in s.values:
            inner = bindings + ((s.param, value),)
            out.append(SetStep(values={s.param: value}, index=s.index, line=s.line,
                               where=f"{s.where}.for", timeout_s=s.timeout_s, guards=g,
                               bindings=inner))
            _expand(s.steps, inner, g, out)


_COMMON_FIELDS = ("kind", "index", "line", "where", "timeout_s", "guards", "bindings", "profile")


def describe_step(step: Step, *, project: Path | None = None) -> str:
    """One line for a dry run: ``index kind field=value ...`` and the repeat values in force."""
    parts = []
    for f in fields(step):
        if f.name in _COMMON_FIELDS or isinstance(step, CheckStep):
            continue
        value = getattr(step, f.name)
        if f.name == "loosen_limits" and not value:
            continue  # shown only when the step asks for it
        if isinstance(value, Path):
            value = value.relative_to(project) if project and value.is_relative_to(project) \
                else value
        elif isinstance(value, bool):
            value = str(value).lower()
        elif isinstance(value, float):
            value = format_value(value)
        elif isinstance(value, tuple):
            value = ",".join(format_value(v) for v in value)
        elif isinstance(value, dict):
            value = " ".join(f"{k}={format_value(v)}" for k, v in value.items())
        elif isinstance(value, Settled):
            value = f"|{value.signal}|<{format_value(value.below)} for {format_value(value.for_s)} s"
        if value is not None:
            parts.append(value if f.name == "values" else f"{f.name}={value}")
    if isinstance(step, CheckStep):
        parts.append(f"{step.metric} {step.op} {format_value(step.value)}")
    if step.timeout_s is not None:
        parts.append(f"timeout_s={format_value(step.timeout_s)}")
    text = f"{step.index:<8} {step.kind:<7} {' '.join(str(p) for p in parts)}".rstrip()
    if step.bindings:
        text += "   [" + ", ".join(f"{k}={format_value(v)}" for k, v in step.bindings) + "]"
    return text
