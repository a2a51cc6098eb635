"""Which gain proposals to recommend, and in what order (docs/METHODS.md §2, "Ranking").

A proposal is **recommended** only when its predicted margins (the worst case over the
model's uncertainty where the fit gives standard errors) meet every limit of
:class:`RankLimits` and every gain lies within the range the board declares for that
parameter. The limits are common practice, no source: upper gain margin ≥ 2 (6 dB),
lower gain margin ≤ 0.5 where the loop is open-loop unstable, phase margin ≥ 30°,
peak sensitivity Ms ≤ 2. Recommended proposals are ranked by the predicted disturbance
IAE; the others are "not recommended", each with its reasons, and get no rank.

Worst case over the fit's 2σ box: the margins are computed on the model at every corner
of the box of its uncertain parameters (±2 standard errors each) and the worst of each
figure is reported; a proposal that meets the limits on the nominal model only is marked
``nominal_only``.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

__all__ = ["RankLimits", "RobustMargins", "robust_margins", "judge_and_rank"]


@dataclass(frozen=True)
class RankLimits:
    gm_min: float = 2.0             # upper gain margin, ratio (6 dB)
    gm_lower_max: float = 0.5       # lower gain margin, ratio (open-loop unstable loops)
    pm_min_deg: float = 30.0
    ms_max: float = 2.0
    within_ranges: bool = True      # every gain inside the board's declared range

    def __post_init__(self):
        if not (self.gm_min > 1 and 0 < self.gm_lower_max < 1 and 0 < self.pm_min_deg < 90
                and self.ms_max > 1):
            raise ValueError("limits: gm_min > 1, 0 < gm_lower_max < 1, 0 < pm_min_deg < 90, "
                             "ms_max > 1")


@dataclass(frozen=True)
class RobustMargins:
    """The worst of each margin over the model's 2σ box (``corners`` models)."""

    stable: bool
    gain_margin_upper: float | None
    gain_margin_lower: float | None
    phase_margin_deg: float | None
    ms: float
    corners: int


def _worst(values, pick):
    vals = [v for v in values if v is not None]
    return pick(vals) if vals else None


def robust_margins(margins_of, plants) -> RobustMargins | None:
    """``margins_of(plant) -> Margins`` at every plant of ``plants`` (the box corners)."""
    ms = []
    for plant in plants:
        try:
            ms.append(margins_of(plant))
        except (ValueError, ArithmeticError):
            return None
    if not ms:
        return None
    stable = all(m.stable for m in ms)
    return RobustMargins(
        stable=stable,
        gain_margin_upper=_worst([m.gain_margin_upper for m in ms], min),
        gain_margin_lower=_worst([m.gain_margin_lower for m in ms], max),
        phase_margin_deg=_worst([m.phase_margin_deg for m in ms], min),
        ms=max(m.ms for m in ms) if stable else math.inf, corners=len(ms))


def box_corners(model, fields_sigma: dict, *, sigmas: float = 2.0, make=None) -> list:
    """Models at the corners of the ±``sigmas`` box: ``fields_sigma`` maps a field of the
    (frozen dataclass) model to its standard error; ``make(**changes)`` builds one."""
    names = [k for k, s in fields_sigma.items() if s and s > 0]
    out = []
    for signs in itertools.product((-1.0, 1.0), repeat=len(names)):
        changes = {k: getattr(model, k) + sg * sigmas * fields_sigma[k]
                   for k, sg in zip(names, signs)}
        try:
            out.append(make(**changes))
        except ValueError:  # a corner outside the model's domain (a negative lag, say)
            continue
    return out


def _margin_reasons(m, limits: RankLimits, unstable_plant: bool, prefix: str = "") -> list:
    why = []
    if not m.stable:
        return [f"{prefix}predicted unstable"]
    gm = m.gain_margin_upper
    if gm is not None and gm < limits.gm_min * (1 - 1e-6):  # a rule at exactly Ku/2 passes
        why.append(f"{prefix}gain margin {gm:.3g} < {limits.gm_min:g}")
    low = m.gain_margin_lower
    if unstable_plant and low is not None and low > limits.gm_lower_max:
        why.append(f"{prefix}lower gain margin {low:.3g} > {limits.gm_lower_max:g}")
    pm = m.phase_margin_deg
    if pm is not None and pm < limits.pm_min_deg:
        why.append(f"{prefix}phase margin {pm:.1f}° < {limits.pm_min_deg:g}°")
    if m.ms > limits.ms_max:
        why.append(f"{prefix}Ms {m.ms:.3g} > {limits.ms_max:g}")
    return why


def _range_reasons(item, params: dict | None) -> list:
    why = []
    for name, value in item.gains.items():
        p = (params or {}).get(name)
        if p is None or value is None:
            continue
        if value < p.minimum - 1e-12 * max(1.0, abs(p.minimum)) or \
                value > p.maximum + 1e-12 * max(1.0, abs(p.maximum)):
            why.append(f"{name} = {value:.4g} outside the board's range "
                       f"{p.minimum:g}..{p.maximum:g}")
    return why


def judge_and_rank(items: list, limits: RankLimits, *, params: dict | None,
                   unstable_plant: bool) -> None:
    """Set ``recommended``, ``not_recommended`` (reasons), ``nominal_only`` and ``rank`` on
    every applicable item (see the module docstring)."""
    ok = []
    for it in items:
        if not it.applies:
            continue
        why = []
        if it.margins is None:
            why.append("no margins: " + (it.margin_missing or "no model to predict them on"))
        else:
            nominal = _margin_reasons(it.margins, limits, unstable_plant)
            why += nominal
            if not nominal and it.robust is not None:
                worst = _margin_reasons(it.robust, limits, unstable_plant,
                                        prefix="worst case over the fit's 2σ box: ")
                if worst:
                    it.nominal_only = True
                    why += worst
        if limits.within_ranges:
            why += _range_reasons(it, params)
        it.not_recommended = why
        it.recommended = not why
        it.rank = None
        if not why:
            ok.append(it)
    ok.sort(key=lambda p: p.response.iae if p.response is not None else math.inf)
    for i, p in enumerate(ok, 1):
        p.rank = i
