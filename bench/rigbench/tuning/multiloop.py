"""Several loops closed at once around one sampled plant, margins at one break point.

A rig often runs loops in cascade: on the balance rig the tilt PID drives the wheel-speed
command and a slow wheel-speed PI moves the tilt set-point (docs/METHODS.md §4). The
margins of one loop then depend on the others being closed. :func:`multiloop_margins`
takes

- ``plant``: a sampled MIMO plant (rigbench.tuning.sampled.SampledSystem, e.g. from
  ``sample_ss``), with named inputs and outputs and its dead times;
- ``loops``: :class:`FeedbackLoop` entries, each a discrete controller (a sampled
  LoopController: the board's PID as it runs) that reads one plant output (``measure``,
  and optionally ``rate``, a plant output used as d(measure)/dt by the derivative) and
  drives either a plant input or the set-point of another loop (``drives`` names that
  loop); a loop's set-point that nothing drives is held at zero;
- ``open_loop``: the name of the loop to break,

closes every other loop and returns the margins of L at the output of ``open_loop``'s
controller (the signal it drives is cut; rigbench.tuning.interconnect has the convention).
For a single loop that is the usual loop broken at the plant input.

Every loop's controller must run at the plant's sample time. A board latency (LoopController
``latency_s``) is not a whole number of samples: fold it into the plant's input dead time
before sampling. ``delay_samples`` is kept (the controller's inputs are delayed, which
for a linear controller is the same as delaying its output).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .interconnect import SampledLoop, close_loops
from .loop import LoopController
from .margin_result import Margins
from .margins_sampled import sampled_margins
from .sampled import SampledSystem, board_pid

__all__ = ["FeedbackLoop", "multiloop_transfer", "multiloop_margins"]


@dataclass(frozen=True)
class FeedbackLoop:
    """One controller of a multi-loop set (module docstring)."""

    name: str
    controller: LoopController
    measure: str                    # plant output the controller reads
    drives: str                     # plant input, or the name of the loop whose set-point
    rate: str | None = None         # plant output read by the derivative (a gyro)

    def setpoint_signal(self) -> str:
        return f"{self.name}.setpoint"


def _blocks(plant: SampledSystem, loops) -> tuple[list, dict]:
    loops = list(loops)
    names = [lp.name for lp in loops]
    if len(set(names)) != len(names):
        raise ValueError(f"loop names must be distinct: {names}")
    by_name = {lp.name: lp for lp in loops}
    blocks, out_signal = [plant], {}
    driven = {}
    for lp in loops:
        c = lp.controller
        where = f"loop {lp.name!r}"
        if c.h_s is None or not math.isclose(c.h_s, plant.h_s, rel_tol=1e-9):
            raise ValueError(f"{where}: the controller must run at the plant's sample time "
                             f"{plant.h_s} s (h_s = {c.h_s})")
        if c.latency_s:
            raise ValueError(f"{where}: fold latency_s into the plant's input dead time")
        for field, sig in (("measure", lp.measure), ("rate", lp.rate)):
            if sig is not None and sig not in plant.outputs:
                raise ValueError(f"{where}: {field} {sig!r} is not a plant output "
                                 f"({', '.join(plant.outputs)})")
        if lp.drives in by_name:
            if lp.drives == lp.name:
                raise ValueError(f"{where} cannot drive its own set-point")
            signal = by_name[lp.drives].setpoint_signal()
        elif lp.drives in plant.inputs:
            signal = lp.drives
        else:
            raise ValueError(f"{where}: drives {lp.drives!r}, neither a plant input "
                             f"({', '.join(plant.inputs)}) nor a loop ({', '.join(names)})")
        if signal in driven:
            raise ValueError(f"loops {driven[signal]!r} and {lp.name!r} drive the same "
                             f"signal {lp.drives!r}")
        driven[signal] = lp.name
        out_signal[lp.name] = signal
        rate = lp.rate if (lp.rate and c.kd) else None
        blocks.append(board_pid(c.kp, c.ki, c.kd, c.tf_s, c.h_s, direct_acting=c.direct_acting,
                                measure=lp.measure, setpoint=lp.setpoint_signal(),
                                output=signal, rate=rate, delay_samples=c.delay_samples))
    return blocks, out_signal


def multiloop_transfer(plant: SampledSystem, loops, open_loop: str) -> SampledLoop:
    """L at the output of loop ``open_loop`` with every other loop closed."""
    blocks, out_signal = _blocks(plant, loops)
    if open_loop not in out_signal:
        raise ValueError(f"no loop named {open_loop!r} ({', '.join(out_signal)})")
    return close_loops(blocks, out_signal[open_loop],
                       description=f"loop {open_loop} broken at its output "
                                   f"{out_signal[open_loop]}, the others closed")


def multiloop_margins(plant: SampledSystem, loops, open_loop: str) -> Margins:
    """Margins of loop ``open_loop`` with every other loop closed (module docstring)."""
    return sampled_margins(multiloop_transfer(plant, loops, open_loop))
