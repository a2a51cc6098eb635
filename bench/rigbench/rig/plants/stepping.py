"""Checks and bookkeeping that the stepped physical plants (``rigbench.rig.plants.balance``,
``rigbench.rig.plants.wheel``) share, apart from their sensors (``rigbench.rig.plants.sensing``).

- ``count_substeps``: checks the options every such plant takes (``noise``, ``dt_s``,
  ``max_substep_s``) and returns how many integration substeps make up one step.
- ``check_push``: checks a disturbance torque and its duration.
- ``clip_command``: checks a command and clips it to the plant's input limits.

The errors are ``ValueError`` naming the argument. Pure Python.
"""

from __future__ import annotations

import math

__all__ = ["check_push", "clip_command", "count_substeps"]


def count_substeps(*, noise: float, dt_s: float, max_substep_s: float) -> int:
    """Check a plant's ``noise`` (≥ 0), ``dt_s`` and ``max_substep_s`` (> 0, all finite);
    return the fewest substeps per ``dt_s`` step that are each no longer than
    ``max_substep_s``."""
    if not (math.isfinite(noise) and noise >= 0.0):
        raise ValueError(f"noise must be finite and >= 0, got {noise}")
    if not (math.isfinite(dt_s) and dt_s > 0.0):
        raise ValueError(f"dt_s must be finite and > 0, got {dt_s}")
    if not (math.isfinite(max_substep_s) and max_substep_s > 0.0):
        raise ValueError(f"max_substep_s must be finite and > 0, got {max_substep_s}")
    return max(1, math.ceil(float(dt_s) / max_substep_s - 1e-9))


def check_push(torque_Nm: float, duration_s: float) -> None:
    """A push needs a finite torque (N·m) and a finite duration ≥ 0 (s)."""
    if not math.isfinite(torque_Nm):
        raise ValueError(f"torque_Nm must be finite, got {torque_Nm}")
    if not (math.isfinite(duration_s) and duration_s >= 0.0):
        raise ValueError(f"duration_s must be finite and >= 0, got {duration_s}")


def clip_command(command: float, limits: tuple[float, float]) -> float:
    """``command`` as a float clipped to ``limits`` (low, high); it must be finite."""
    if not math.isfinite(command):
        raise ValueError(f"command must be finite, got {command}")
    lo, hi = limits
    return hi if command > hi else (lo if command < lo else float(command))
