"""Where a fitted model's loop crosses −180°: the continuous crossing, and the crossing of
the loop sampled at the board's rate (docs/METHODS.md §3, "Sampled ultimate point")."""

from __future__ import annotations

import math

import numpy as np

from rigbench.tuning.loop import LoopController, PlantModel
from rigbench.tuning.margins import margins

__all__ = ["model_ultimate", "sampled_ultimate"]


def model_ultimate(plant: PlantModel, omega_hint: float, direct: bool, span: float = 5.0):
    """(ku, tu_s) where the model's phase (with the loop's sign) crosses −180°, or None."""
    sign = -1.0 if direct else 1.0
    w = np.geomspace(omega_hint / span, omega_hint * span, 4000)
    ph = np.unwrap(np.angle(sign * plant.response(w)))
    ph -= 2 * math.pi * round(float(ph[0]) / (2 * math.pi))
    idx = np.flatnonzero(np.diff(np.sign(ph + math.pi)) != 0)
    if not len(idx):
        return None
    i = min(idx, key=lambda j: abs(math.log(w[j] / omega_hint)))
    # the crossing, linear in log ω between two grid points (0.2% apart)
    x0, x1 = math.log(w[i]), math.log(w[i + 1])
    y0, y1 = ph[i] + math.pi, ph[i + 1] + math.pi
    wu = math.exp(x0 - y0 * (x1 - x0) / (y1 - y0)) if y1 != y0 else w[i]
    return 1.0 / abs(complex(plant.response(np.array([wu]))[0])), 2 * math.pi / wu


def sampled_ultimate(plant: PlantModel, h_s: float, direct: bool):
    """(ku, tu_s) of the sampled loop: the upper gain margin of a discrete P controller
    of gain 1 at the board's sample time on the model, and its phase crossover."""
    try:
        m = margins(LoopController(1.0, h_s=h_s, direct_acting=direct), plant)
    except (ValueError, np.linalg.LinAlgError, ZeroDivisionError):
        return None
    if not m.stable or m.gain_margin_upper is None or not m.phase_crossover_rad_s:
        return None
    return m.gain_margin_upper, 2 * math.pi / m.phase_crossover_rad_s
