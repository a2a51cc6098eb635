"""The result of a margin computation (:class:`Margins`) and how it is put together from
the crossings, shared by continuous and sampled loops. Definitions: rigbench.tuning.margins.

A margin that is ``None`` always has a reason in ``reasons[field]``, one of:
- ``"closed loop unstable"`` — margins of an unstable loop are not reported;
- ``"no phase crossover above 1"`` / ``"no phase crossover below 1"`` — no gain factor in
  that direction destabilises the loop: the gain margin is unlimited (upper) or the loop
  stays stable down to zero gain (lower). Not a failure: the margin is infinite;
- ``"no gain crossover"`` — |L| never equals 1, so there is no phase or delay margin;
- ``"not computed: …"`` — the computation failed, with why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["Margins", "assemble", "UNSTABLE", "NO_UPPER", "NO_LOWER", "NO_CROSSOVER",
           "gain_margin_text"]

UNSTABLE = "closed loop unstable"
NO_UPPER = "no phase crossover above 1"
NO_LOWER = "no phase crossover below 1"
NO_CROSSOVER = "no gain crossover"


@dataclass(frozen=True)
class Margins:
    stable: bool
    gain_margin_upper: float | None       # ratio (> 1), None: see reasons
    gain_margin_upper_db: float | None
    gain_margin_lower: float | None       # ratio (< 1), None: see reasons
    gain_margin_lower_db: float | None
    phase_margin_deg: float | None        # the worst over every gain crossover
    crossover_rad_s: float | None         # where the phase margin is read
    delay_margin_s: float | None
    ms: float
    ms_db: float
    phase_crossover_rad_s: float | None   # where the upper gain margin is read
    method: str                           # how stability was decided
    reasons: dict = field(default_factory=dict)   # field name -> why it is None
    drift_modes: int = 0                  # hidden modes at z = 1 not counted
    notes: str = ""

    def reason(self, name: str) -> str:
        """Why margin ``name`` is None ('' when it has a value)."""
        return self.reasons.get(name, "")


def _db(x):
    return None if x is None else float(20.0 * math.log10(x))


def _f(x):
    return None if x is None else float(x)


def assemble(stable: bool, method: str, wc, lc, crit, ms: float, *, notes: str = "",
             drift_modes: int = 0, failed: dict | None = None) -> Margins:
    """Margins from the gain crossovers ``wc`` (rad/s) with L there (``lc``), the critical
    gains ``crit`` [(1/|L|, ω)] at the phase crossovers and ends, and ``ms``.
    ``failed``: {field: why} for parts that could not be computed."""
    reasons = {k: f"not computed: {v}" for k, v in (failed or {}).items()}
    upper = lower = w_up = pm = wgc = dm = None
    if not stable:
        for k in ("gain_margin_upper", "gain_margin_lower", "phase_margin_deg",
                  "delay_margin_s"):
            reasons.setdefault(k, UNSTABLE)
    else:
        above = [(k, x) for k, x in crit if k > 1.0]
        below = [k for k, _ in crit if k < 1.0]
        if above:
            upper, w_up = min(above)
        else:
            reasons.setdefault("gain_margin_upper", NO_UPPER)
        if below:
            lower = max(below)
        else:
            reasons.setdefault("gain_margin_lower", NO_LOWER)
        # phase margin 180° + arg L ≡ arg(−L), in (−180°, 180°], at every crossover
        pms = [(math.degrees(math.atan2(-v.imag, -v.real)), float(x))
               for v, x in zip(np.atleast_1d(lc), np.atleast_1d(wc))]
        if pms:
            pm, wgc = min(pms)
            dms = [math.radians(p % 360.0) / x for p, x in pms if x > 0]
            if dms:
                dm = min(dms)
            else:
                reasons.setdefault("delay_margin_s", NO_CROSSOVER)
        else:
            reasons.setdefault("phase_margin_deg", NO_CROSSOVER)
            reasons.setdefault("delay_margin_s", NO_CROSSOVER)
    for k in list(reasons):
        if reasons[k].startswith("not computed"):
            if k == "gain_margin_upper":
                upper = w_up = None
            elif k == "gain_margin_lower":
                lower = None
            elif k == "phase_margin_deg":
                pm = wgc = dm = None
    ms_db = 20.0 * math.log10(ms) if math.isfinite(ms) and ms > 0 else math.inf
    return Margins(bool(stable), _f(upper), _db(upper), _f(lower), _db(lower), _f(pm),
                   _f(wgc), _f(dm), float(ms), ms_db, _f(w_up), method, reasons,
                   int(drift_modes), notes)


def gain_margin_text(value: float | None, reason: str = "") -> str:
    """A gain margin as every screen and the CLI show it: the ratio with dB in brackets;
    for a missing one ``inf`` when no phase crossover limits the gain, ``?`` when it was
    not computed, ``none`` when the loop has no such margin (reason ``reason``)."""
    import math
    if value is None:
        if reason == NO_UPPER:
            return "inf"
        return "?" if (not reason or reason.startswith("not computed")) else "none"
    if not math.isfinite(value):
        return "?"
    return f"{value:.3g} ({20 * math.log10(value):.1f} dB)" if value > 0 else f"{value:.3g}"
