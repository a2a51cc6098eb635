"""PID tuning rules from the ultimate point (Ku, Tu) and from one measured point G(jω0).

Every rule is stated in the ideal (standard) form C(s) = K(1 + 1/(s·Ti) + s·Td), Ti and Td
in s, and converted explicitly to the parallel form kp = K, ki = K/Ti, kd = K·Td
(docs/METHODS.md §1). Gains are in (controller output)/(measured input) of whatever units
Ku or the point were measured in; conversion to a board's units happens elsewhere
(rigbench.base.units). The rules, their sources and the notes on their validity:
docs/METHODS.md §2 and §2.1.

Public API: IdealPid, ParallelPid, Proposal, ULTIMATE_RULES, AMIGO_KAPPA_RANGE,
rule_from_ultimate, phase_margin_design, propose_from_ultimate, propose_from_point.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from rigbench.base.jsonsafe import to_plain
from rigbench.tuning.point import FrequencyPoint, wrap_phase_deg

__all__ = ["IdealPid", "ParallelPid", "Proposal", "ULTIMATE_RULES", "AMIGO_KAPPA_RANGE",
           "rule_from_ultimate", "phase_margin_design", "propose_from_ultimate",
           "propose_from_point", "PLANT_KINDS"]

PLANT_KINDS = ("stable", "integrating", "unstable")
AMIGO_KAPPA_RANGE = (0.1, 1.0)  # value from memory, see module docstring

_ZN = "Ziegler & Nichols (1942), Optimum settings for automatic controllers, Trans. ASME 64"
_LATER = "later secondary literature (variant of Ziegler & Nichols; value from memory)"
_TL = "Tyreus & Luyben (1992), Ind. Eng. Chem. Res. 31"
_AMIGO = "Åström & Hägglund (2006), Advanced PID Control, ISA, ch. 7 (frequency form)"
_AH = ("Åström & Hägglund (1984), Automatic tuning of simple regulators with "
       "specifications on phase and amplitude margins, Automatica 20(5)")


@dataclass(frozen=True)
class ParallelPid:
    """C(s) = kp + ki/s + kd·s."""

    kp: float
    ki: float = 0.0
    kd: float = 0.0

    def to_ideal(self) -> "IdealPid":
        if self.kp == 0:
            raise ValueError("no ideal form with kp = 0")
        ti = self.kp / self.ki if self.ki else None
        return IdealPid(self.kp, ti, self.kd / self.kp)


@dataclass(frozen=True)
class IdealPid:
    """C(s) = K(1 + 1/(s·Ti) + s·Td); ``ti_s`` None means no integral action."""

    k: float
    ti_s: float | None = None
    td_s: float = 0.0

    def to_parallel(self) -> ParallelPid:
        """kp = K, ki = K/Ti, kd = K·Td (docs/METHODS.md §1)."""
        ki = self.k / self.ti_s if self.ti_s else 0.0
        return ParallelPid(self.k, ki, self.k * self.td_s)

    def response(self, omega_rad_s: float) -> complex:
        """C(jω) of the ideal (unfiltered) controller."""
        s = 1j * omega_rad_s
        return self.k * (1 + (1 / (s * self.ti_s) if self.ti_s else 0) + s * self.td_s)


@dataclass
class Proposal:
    """One rule's proposal. When ``applies`` is False, ``reason`` says why and the gains
    are None. ``margins`` (a rigbench.tuning.margins.Margins) is filled in by whoever
    predicts them on a model; ``details`` carries design-specific figures."""

    rule: str
    kind: str                     # 'P', 'PI', 'PID' or 'state-feedback'
    ideal: IdealPid | None
    applies: bool = True
    reason: str = ""
    source: str = ""
    notes: str = ""
    margins: Any = None
    details: dict = field(default_factory=dict)

    @property
    def parallel(self) -> ParallelPid | None:
        return self.ideal.to_parallel() if self.ideal is not None else None

    @property
    def kp(self) -> float | None:
        return self.parallel.kp if self.ideal is not None else None

    @property
    def ki(self) -> float | None:
        return self.parallel.ki if self.ideal is not None else None

    @property
    def kd(self) -> float | None:
        return self.parallel.kd if self.ideal is not None else None

    def as_dict(self) -> dict:
        """Plain, JSON-ready dict: the ideal form as 'form' {k, ti_s, td_s}, the parallel
        gains kp, ki, kd, and margins/details with numbers as floats (complex as [re, im])."""
        form = None if self.ideal is None else {"k": self.ideal.k, "ti_s": self.ideal.ti_s,
                                                 "td_s": self.ideal.td_s}
        return to_plain({"rule": self.rule, "kind": self.kind, "applies": self.applies,
                       "reason": self.reason, "source": self.source, "notes": self.notes,
                       "form": form, "kp": self.kp, "ki": self.ki, "kd": self.kd,
                       "margins": self.margins, "details": self.details})


# rule id -> (kind, source, notes, function (ku, tu, kappa) -> IdealPid)
ULTIMATE_RULES: dict[str, tuple[str, str, str, Any]] = {
    "ziegler-nichols-p": ("P", _ZN, "", lambda ku, tu, kp: IdealPid(0.5 * ku)),
    "ziegler-nichols-pi": ("PI", _ZN, "", lambda ku, tu, kp: IdealPid(0.45 * ku, tu / 1.2)),
    "ziegler-nichols-pid": ("PID", _ZN, "",
                            lambda ku, tu, kp: IdealPid(0.6 * ku, tu / 2, tu / 8)),
    "zn-some-overshoot-pid": ("PID", _LATER, "not in the 1942 paper",
                              lambda ku, tu, kp: IdealPid(ku / 3, tu / 2, tu / 3)),
    "zn-no-overshoot-pid": ("PID", _LATER, "not in the 1942 paper",
                            lambda ku, tu, kp: IdealPid(0.2 * ku, tu / 2, tu / 3)),
    "tyreus-luyben-pi": ("PI", _TL, "", lambda ku, tu, kp: IdealPid(ku / 3.2, 2.2 * tu)),
    "tyreus-luyben-pid": ("PID", _TL, "",
                          lambda ku, tu, kp: IdealPid(ku / 2.2, 2.2 * tu, tu / 6.3)),
    "amigo-pi": ("PI", _AMIGO, "assumes set-point weighting and a derivative filter",
                 lambda ku, tu, k: IdealPid(0.16 * ku, tu / (1 + 4.5 * k))),
    "amigo-pid": ("PID", _AMIGO, "assumes set-point weighting and a derivative filter; "
                  "Td denominator (1 - 0.95κ) chosen by a consistency check",
                  lambda ku, tu, k: IdealPid((0.3 - 0.1 * k ** 4) * ku, 0.6 * tu / (1 + 2 * k),
                                             0.15 * (1 - k) * tu / (1 - 0.95 * k))),
}


def _check_plant(plant: str) -> None:
    if plant not in PLANT_KINDS:
        raise ValueError(f"plant must be one of {PLANT_KINDS}, not {plant!r}")


def rule_from_ultimate(rule: str, ku: float, tu_s: float, *, static_gain: float | None = None,
                       plant: str = "stable") -> Proposal:
    """One ultimate-point rule by id; ``applies`` False with a reason where it does not."""
    _check_plant(plant)
    try:
        kind, source, notes, fn = ULTIMATE_RULES[rule]
    except KeyError:
        raise ValueError(f"unknown rule {rule!r}; known: {', '.join(ULTIMATE_RULES)}") from None

    def no(reason: str) -> Proposal:
        return Proposal(rule, kind, None, False, reason, source, notes)

    if plant == "unstable":
        return no("no ultimate point: loop is open-loop unstable")
    if not (ku > 0 and tu_s > 0):
        return no("no ultimate point measured (Ku and Tu must be positive)")
    kappa = None
    if rule.startswith("amigo"):
        if plant == "integrating":
            return no("AMIGO frequency rules hold for stable processes with essentially "
                      "monotone step responses, not integrating ones")
        if static_gain is None or static_gain <= 0:
            return no("needs the static process gain (run a biased relay)")
        kappa = 1.0 / (static_gain * ku)
        lo, hi = AMIGO_KAPPA_RANGE
        if not lo <= kappa <= hi:
            return no(f"outside validity: κ = 1/(Kp·Ku) = {kappa:.3f} not in [{lo}, {hi}]")
        notes = f"{notes}; κ = {kappa:.3f}"
    return Proposal(rule, kind, fn(ku, tu_s, kappa), True, "", source, notes.strip("; "),
                    details={"ku": ku, "tu_s": tu_s, "kappa": kappa})


def phase_margin_design(point: FrequencyPoint, *, margin_deg: float = 45.0, kind: str = "PID",
                        alpha: float = 4.0, direct_acting: bool = False) -> Proposal:
    """Åström–Hägglund one-point design: C(jω0)G(jω0) = e^{j(−180° + margin_deg)}.

    ``point`` is the plant's G(jω0) from controller output to measurement. With
    ``direct_acting`` (error = measurement − set-point, the board's tilt-loop convention)
    the loop sees −G, so the point is turned by 180° before the design; the gains are then
    for the direct-acting controller.
    """
    kind = kind.upper()
    if kind not in ("PI", "PID"):
        raise ValueError("kind must be 'PI' or 'PID'")
    rule = f"astrom-hagglund-pm-{kind.lower()}"
    r, w0 = point.gain, point.omega_rad_s
    psi = math.radians(point.phase_deg + (180.0 if direct_acting else 0.0))
    beta = math.radians(wrap_phase_deg(math.degrees(-math.pi + math.radians(margin_deg) - psi),
                                       centre_deg=0.0))
    notes = (f"target phase margin {margin_deg:g}° at ω0 = {w0:.4g} rad/s; "
             f"β = {math.degrees(beta):.1f}°; ideal controller, no derivative filter: "
             "predict margins on a model with the real filter and delay")

    def no(reason: str) -> Proposal:
        return Proposal(rule, kind, None, False, reason, _AH, notes)

    if not (r > 0 and w0 > 0):
        return no("the measured point needs a positive gain and frequency")
    if math.cos(beta) <= 1e-9:
        return no(f"needs {math.degrees(beta):.0f}° of phase from the controller at ω0; "
                  "a PID gives less than 90°")
    k = math.cos(beta) / r
    if kind == "PI":
        if beta >= 0:
            return no(f"a PI controller only lags; the point needs {math.degrees(beta):.0f}° "
                      "of lead at ω0")
        ideal = IdealPid(k, -1.0 / (w0 * math.tan(beta)))
    else:
        tb = math.tan(beta)
        td = (tb + math.sqrt(tb * tb + 4.0 / alpha)) / (2.0 * w0)
        ideal = IdealPid(k, alpha * td, td)
    return Proposal(rule, kind, ideal, True, "", _AH, notes,
                    details={"beta_deg": math.degrees(beta), "omega0_rad_s": w0,
                             "target_margin_deg": margin_deg, "alpha": alpha})


def propose_from_ultimate(ku: float, tu_s: float, *, static_gain: float | None = None,
                          plant: str = "stable", margin_deg: float = 45.0,
                          point: FrequencyPoint | None = None,
                          direct_acting: bool = False) -> list[Proposal]:
    """All ultimate-point rules plus the one-point design.

    The one-point design uses ``point`` if given (the exact point of the relay test),
    otherwise the ultimate point itself (gain 1/Ku, phase −180°, ω = 2π/Tu). On an
    'unstable' plant the ultimate-point rules do not apply; the one-point design does.
    ``direct_acting`` applies to the one-point design only (see phase_margin_design).
    """
    _check_plant(plant)
    out = [rule_from_ultimate(rule, ku, tu_s, static_gain=static_gain, plant=plant)
           for rule in ULTIMATE_RULES]
    if point is None and ku > 0 and tu_s > 0:
        point = FrequencyPoint(1.0 / ku, -180.0, 2.0 * math.pi / tu_s)
    if point is not None:
        out += [phase_margin_design(point, margin_deg=margin_deg, kind=k,
                                    direct_acting=direct_acting) for k in ("PI", "PID")]
    return out


def propose_from_point(point: FrequencyPoint, *, static_gain: float | None = None,
                       plant: str = "stable", margin_deg: float = 45.0,
                       ultimate_tol_deg: float = 3.0,
                       direct_acting: bool = False) -> list[Proposal]:
    """Proposals from one measured point G(jω0).

    The ultimate-point rules are applied only if the point's phase is within
    ``ultimate_tol_deg`` of −180° (then Ku = 1/gain, Tu = 2π/ω0); otherwise they are
    listed as not applicable, with the reason. The one-point designs always are tried.
    """
    _check_plant(plant)
    off = abs(wrap_phase_deg(point.phase_deg + (180.0 if direct_acting else 0.0)) + 180.0)
    if off <= ultimate_tol_deg or plant == "unstable":
        return propose_from_ultimate(1.0 / point.gain, point.period_s, static_gain=static_gain,
                                     plant=plant, margin_deg=margin_deg, point=point,
                                     direct_acting=direct_acting)
    out = []
    for rule, (kind, source, notes, _) in ULTIMATE_RULES.items():
        out.append(Proposal(rule, kind, None, False,
                            f"the point's phase {point.phase_deg:.1f}° is {off:.1f}° from "
                            f"−180°: not the ultimate point", source, notes))
    out += [phase_margin_design(point, margin_deg=margin_deg, kind=k,
                                direct_acting=direct_acting) for k in ("PI", "PID")]
    return out
