"""What the live view shows, worked out from the board's declarations and a telemetry block:
which signals to plot by default, the vertical scale, readouts and headroom to trip limits.

Display arithmetic only (ranges, last values, distance to a limit), kept out of the widgets
so they stay drawing code. Nothing here knows a particular rig: it reads the names the
board declared (PROTOCOL.md §5.2–§5.4: ``trip_<signal>``, loops' ``measure``/``output``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

WINDOWS_S = (2.0, 5.0, 10.0, 30.0)


@dataclass(frozen=True)
class Readout:
    """One signal's figures over the visible window, in the board's unit."""

    name: str
    unit: str
    last: float | None
    low: float | None
    high: float | None
    trip: float | None  # |signal| limit from trip_<name>, when declared
    headroom: float | None  # trip − |last|
    headroom_fraction: float | None  # headroom / trip (1 = at rest, 0 = at the limit)


def trip_limit(params: dict, signal: str) -> float | None:
    """The board's ``trip_<signal>`` value when it declares one (PROTOCOL.md §5.2)."""
    p = params.get(f"trip_{signal}")
    value = getattr(p, "value", None)
    return abs(float(value)) if value is not None else None


def default_signals(signals: list[str], loops: list, params: dict, count: int = 3) -> list[str]:
    """Signals to plot first, each group in the board's declared order: signals with a trip
    limit, then loop measures, then loop outputs, then the rest."""
    measures = {getattr(loop, "measure", None) for loop in loops}
    outputs = {getattr(loop, "output", None) for loop in loops}
    groups = (
        [n for n in signals if trip_limit(params, n) is not None],
        [n for n in signals if n in measures],
        [n for n in signals if n in outputs],
        signals,
    )
    order: list[str] = []
    for group in groups:
        order += [n for n in group if n not in order]
    return order[:count]


def auto_scale(arrays, *, margin: float = 0.1, min_span: float = 1e-6) -> tuple[float, float]:
    """A range holding every finite value with ``margin`` of the span added each side."""
    finite = [a[np.isfinite(a)] for a in arrays if len(a)]
    finite = [a for a in finite if len(a)]
    if not finite:
        return -1.0, 1.0
    low = min(float(a.min()) for a in finite)
    high = max(float(a.max()) for a in finite)
    if high - low < min_span:  # a flat line: show it mid-plot on a readable scale
        half = max(0.1 * abs(low), 1.0)
        return low - half, low + half
    span = max(high - low, 1e-3 * max(abs(low), abs(high)))
    mid = 0.5 * (low + high)
    half = 0.5 * span * (1.0 + 2.0 * margin)
    return mid - half, mid + half


def fixed_scale(params: dict, signal: str, current: tuple[float, float]) -> tuple[float, float]:
    """The fixed scale of a plot: ±trip limit when declared (so headroom is visible), else
    the range shown when the scale was fixed."""
    trip = trip_limit(params, signal)
    if trip:
        return -trip * 1.05, trip * 1.05
    return current


def readout(name: str, unit: str, values: np.ndarray, params: dict) -> Readout:
    trip = trip_limit(params, name)
    if len(values) == 0:
        return Readout(name, unit, None, None, None, trip, None, None)
    last = float(values[-1])
    head = frac = None
    if trip:
        head = trip - abs(last)
        frac = head / trip
    return Readout(name, unit, last, float(np.min(values)), float(np.max(values)), trip,
                   head, frac)


def format_value(value: float | None, unit: str = "", width: int = 9) -> str:
    if value is None:
        return "–".rjust(width) + (f" {unit}" if unit else "")
    text = f"{value:+.4g}" if abs(value) < 1e5 else f"{value:+.3e}"
    return text.rjust(width) + (f" {unit}" if unit else "")


def headroom_text(r: Readout, *, short: bool = False) -> str:
    """e.g. 'headroom 37.7 rev/s to trip at ±50 (75 %)'; '' without a trip limit."""
    if r.trip is None or r.headroom is None:
        return ""
    pct = 100.0 * max(r.headroom_fraction, 0.0)
    if short:
        return f"{pct:.0f} % left to ±{r.trip:g}"
    return f"headroom {r.headroom:.3g} {r.unit} ({pct:.0f} %) to trip at ±{r.trip:g}"
