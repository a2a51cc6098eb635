"""Guards and the result types of the experiment runner (runner.py): what stops an
experiment, the limits it watches, the progress it reports and what it returns.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["ExperimentResult", "ExperimentStopped", "ArmRefused", "Guards", "Progress",
           "STOP_REASONS", "CLEAR_HINT", "guard_limits"]

# what a refusal because of a latched fault tells the user to do (never done for them)
CLEAR_HINT = ("check the rig, then clear the fault with `rigbench clear` (in a sequence: a "
              "`clear` step before `arm`); clearing never starts the motor")

STOP_REASONS = ("done", "cancelled", "guard", "trip", "stale", "lost", "reset", "error")


class ArmRefused(Exception):
    """The board refused to arm; ``reasons`` are its interlock conditions (PROTOCOL §7.3)."""

    def __init__(self, reasons: tuple[str, ...], text: str = "") -> None:
        self.reasons = tuple(reasons)
        text = text or f"the board refused to arm: {', '.join(self.reasons)}"
        if "fault" in self.reasons and CLEAR_HINT not in text:
            text += f"; {CLEAR_HINT}"
        super().__init__(text)


class ExperimentStopped(Exception):
    """Raised inside the ``with`` block when a guard, cancel or the link ends the run;
    the context manager swallows it (read ``exp.result.stopped_by``)."""

    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(f"{reason}: {detail}")
        self.reason, self.detail = reason, detail


@dataclass(frozen=True)
class Guards:
    """Host-side guards. Limits are in the board's units.

    ``trip_fraction``: guard at this fraction of every ``trip_<signal>`` the board declares
    (so the host stops an experiment before the board's own trip). ``limits``: explicit
    limits per signal name, which replace the fraction for that signal. ``stale_s``:
    longest gap since the newest telemetry row. ``startup_s``: grace for the first row.
    """

    trip_fraction: float = 0.8
    limits: dict = field(default_factory=dict)
    stale_s: float = 0.5
    startup_s: float = 1.0

    def __post_init__(self):
        if not 0 < self.trip_fraction <= 1:
            raise ValueError("trip_fraction must lie in (0, 1]")
        if self.stale_s <= 0 or self.startup_s <= 0:
            raise ValueError("stale_s and startup_s must be positive")


def guard_limits(link, guards: Guards) -> dict[str, float]:
    """Signal name -> guard limit (board units) for this board."""
    names = {s.name for s in link.signals}
    out = {}
    for pname, p in link.params.items():
        m = re.fullmatch(r"trip_([a-z][a-z0-9_]*)", pname)
        if m and m.group(1) in names and p.value > 0:
            out[m.group(1)] = guards.trip_fraction * float(p.value)
    for name, value in guards.limits.items():
        if name not in names:
            raise ValueError(f"guard on {name!r}: the board has no such signal")
        out[name] = float(value)
    return out


@dataclass(frozen=True)
class Progress:
    """What an experiment reports while it runs (for a progress bar or a live view)."""

    experiment: str
    phase: str
    elapsed_s: float
    budget_s: float | None
    fraction: float | None          # 0..1 when it can be estimated
    cycles: int = 0
    cycles_needed: int = 0
    estimate: dict = field(default_factory=dict)
    message: str = ""


@dataclass(eq=False)
class ExperimentResult:
    """Everything recorded by one experiment. ``values[:, i]`` is ``signals[i]``."""

    name: str
    stopped_by: str                  # one of STOP_REASONS
    detail: str
    signals: tuple[str, ...]
    units: tuple[str, ...]
    t_s: np.ndarray                  # link-clock seconds
    values: np.ndarray
    events: list                     # LinkEvent, in order
    marks: list                      # (t_s, label) of phases
    started_s: float
    ended_s: float
    killed: bool
    motor_after: str | None
    recording: Path | None = None
    rows_skipped: int = 0

    def column(self, name: str) -> np.ndarray:
        try:
            return self.values[:, self.signals.index(name)]
        except ValueError:
            raise KeyError(f"no signal {name!r}; have {', '.join(self.signals)}") from None

    def window(self, t0_s: float, t1_s: float | None = None) -> slice:
        a = int(np.searchsorted(self.t_s, t0_s - 1e-9))
        b = len(self.t_s) if t1_s is None else int(np.searchsorted(self.t_s, t1_s + 1e-9))
        return slice(a, b)

    def mark(self, label: str) -> float | None:
        for t, text in self.marks:
            if text == label:
                return t
        return None
