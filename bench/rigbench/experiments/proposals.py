"""Gain proposals from a relay run, each with margins and a disturbance response predicted
on a model identified from the same run, ranked.

Which proposals (gains always in the board's parallel form kp, ki, kd, in its declared
units, for its sample time):
- **Stable and integrating loops** (``relay=output``): the published ultimate-point rules
  (rigbench.tuning.rules: Ziegler–Nichols P/PI/PID and the later variants, Tyreus–Luyben,
  AMIGO where its validity holds) and the Åström–Hägglund one-point PI/PID design on the
  measured point with the target phase margin ``margin_deg``. The rules take Ku = 1/|G|,
  Tu = 2π/ω from the exact measured point when its phase is within 3° of −180°; otherwise
  (a large hysteresis moves the cycle off −180°) from the fitted model's own −180°
  crossing, and only without a model from the describing function (docs/METHODS.md §3 error
  band). The model: K·e^{−Ls}/(Ts+1)^n (or with an integrator), fitted to G(jω), G(3jω)
  and the static gain of a biased relay (pointmodel.py).
- **Unstable loops** (``relay=integral``): the ultimate-point rules are listed as "does not
  apply" (no P-only ultimate gain exists, docs/METHODS.md §4); offered are the one-point
  designs on the measured point and, from the balance model fitted to the run's record
  (balancefit.py), pole placement PI/PID and LQR turned into the nearest PID plus the
  outer wheel-speed trim (the board has no state feedback, but the trim loop supplies the
  wheel-speed terms).

Predictions, for every proposal that applies and for the board's current gains:
- margins (rigbench.tuning.margins) of the board's PID as it runs at its sample time, with
  the derivative filter the board declares (``dfilt=``, else ``<loop>_dfilt_s``) and on its
  rate signal when it declares one, on the exact zero-order-hold model in state space,
  however long its dead time (the dead time is kept as an exact factor, so hundreds of
  samples cost milliseconds); unstable loops get lower and upper gain margins;
- a simulated disturbance on the model: a load step at the plant input of the relay's
  amplitude (stable loops), or an input pulse as large as the output's swing in the relay
  test and a quarter period long (unstable loops); metrics per docs/METHODS.md §5 with a band
  of ``band_noise`` × the noise RMS measured in the quiet hold.
Ranking (ranking.py): a proposal is recommended only when its margins meet the limits
(GM ≥ 2, lower GM ≤ 0.5 for open-loop unstable loops, PM ≥ 30°, Ms ≤ 2; common practice,
no source) — on the worst corner of the model's 2σ box where the fit gives standard
errors — and its gains lie in the board's declared ranges; recommended ones are ranked
by predicted IAE, the others listed with their reasons. Missing margins say why
(``margin_missing``), a missing model says why (``ProposalSet.model_missing``).

The rules take the ultimate point of the **sampled** loop (the board's rate; the model's
−180° crossing with the discrete P controller) — the continuous one is reported beside it.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field, replace

import numpy as np

from rigbench.tuning.loop import LoopController, PlantModel, simulate_disturbance
from rigbench.tuning.margins import Margins, margins
from rigbench.tuning.metrics import DisturbanceMetrics, disturbance_metrics
from rigbench.tuning.rules import IdealPid, ParallelPid, Proposal, propose_from_point, \
    propose_from_ultimate
from rigbench.tuning.balance import design_pole_placement
from rigbench.base.units import si_factor

from rigbench.experiments.balancefit import board_plant, fit_from_run, lqr_board_gains, simulate_state_feedback
from rigbench.experiments.pointmodel import fit_process_model
from rigbench.experiments.ranking import RankLimits, box_corners, judge_and_rank, \
    robust_margins
from rigbench.experiments.relay import RelayRun
from rigbench.experiments.ultimate import model_ultimate as _model_ultimate, \
    sampled_ultimate as _sampled_ultimate

log = logging.getLogger(__name__)

__all__ = ["Rated", "ProposalSet", "propose"]


@dataclass
class Rated:
    """One proposal with its predictions. ``gains``: board parameter -> value to set."""

    rule: str
    kind: str
    applies: bool
    reason: str
    source: str
    notes: str
    gains: dict
    kp: float | None
    ki: float | None
    kd: float | None
    ideal: IdealPid | None
    margins: Margins | None = None
    predicted_stable: bool | None = None
    response: DisturbanceMetrics | None = None
    rank: int | None = None
    details: dict = field(default_factory=dict)
    margin_missing: str = ""        # why there are no margins ('' when there are)
    robust: object = None           # ranking.RobustMargins over the fit's 2σ box, or None
    nominal_only: bool = False      # margins meet the limits on the nominal model only
    recommended: bool | None = None
    not_recommended: list = field(default_factory=list)   # reasons


@dataclass
class ProposalSet:
    loop: object                    # LoopSignals
    model_kind: str                 # lag | integrating | balance-speed | balance-torque | none
    model_text: str
    model: object
    plant: PlantModel | None        # board units: measure/output
    direct_acting: bool
    ultimate: dict                  # ku, tu_s and where they came from, for the rules
    current: Rated | None
    proposals: list
    disturbance: dict
    notes: list = field(default_factory=list)
    limits: RankLimits = field(default_factory=RankLimits)
    model_missing: str = ""         # why there is no model ('' when there is one)
    static_consistent: bool | None = None   # model vs biased relay's ∫y/∫u; None: unchecked

    def recommended(self) -> list:
        return sorted((p for p in self.proposals if p.rank is not None), key=lambda p: p.rank)

    def best(self) -> Rated | None:
        ranked = [p for p in self.proposals if p.rank is not None]
        return min(ranked, key=lambda p: p.rank) if ranked else None

    def by_rule(self, rule: str) -> Rated:
        for p in self.proposals:
            if p.rule == rule:
                return p
        raise KeyError(rule)


def _from_proposal(p: Proposal, ls, scale: float = 1.0) -> Rated:
    """A tuning Proposal (gains times ``scale`` into the board's units) as a Rated."""
    if p.ideal is None:
        return Rated(p.rule, p.kind, False, p.reason, p.source, p.notes, {}, None, None, None,
                     None, details=dict(p.details))
    par = p.parallel
    kp, ki, kd = par.kp * scale, par.ki * scale, par.kd * scale
    return Rated(p.rule, p.kind, True, "", p.source, p.notes,
                 dict(zip(ls.gains, (kp, ki, kd))), kp, ki, kd,
                 ParallelPid(kp, ki, kd).to_ideal() if kp else None, details=dict(p.details))


class _Judge:
    """Predicts margins and the disturbance response of gains on the model."""

    def __init__(self, run: RelayRun, plant, direct: bool, band: float, dist: dict, *,
                 steps: int = 2000, corners=(), missing: str = ""):
        self.steps, self.corners, self.missing = steps, list(corners), missing
        ls = run.loop
        self.plant, self.direct, self.band, self.dist = plant, direct, band, dist
        self.h = run.board.dt_s if run.board else 0.002
        self.tf = ls.dfilt_s or 0.0
        self.limit = ls.output_limit
        # the board's derivative reads the declared rate signal (a gyro) when there is one
        self.rate_derivative = bool(ls.rate)

    def rate(self, item: Rated) -> None:
        if not item.applies:
            return
        if self.plant is None:
            item.margin_missing = f"no model ({self.missing or 'not fitted'})"
            return
        ctrl = LoopController(item.kp, item.ki, item.kd, tf_s=self.tf, h_s=self.h,
                              direct_acting=self.direct, rate_derivative=self.rate_derivative)
        try:
            with np.errstate(divide="ignore", invalid="ignore"):
                item.margins = margins(ctrl, self.plant)
        except (ValueError, np.linalg.LinAlgError, ZeroDivisionError) as exc:
            item.notes = f"{item.notes}; margins not computed: {exc}".strip("; ")
            item.margin_missing = f"margins not computed: {exc}"
            return
        if self.corners:
            with np.errstate(divide="ignore", invalid="ignore"):
                item.robust = robust_margins(lambda pl: margins(ctrl, pl), self.corners)
        item.predicted_stable = item.margins.stable
        if not item.predicted_stable:
            return
        d = self.dist
        t_end = d["t_end_s"]
        if t_end / self.h > self.steps:  # long: the continuous controller on a coarser grid
            ctrl = LoopController(item.kp, item.ki, item.kd, tf_s=self.tf,
                                  direct_acting=self.direct)
        try:
            r = simulate_disturbance(ctrl, self.plant, t_end_s=t_end, kind=d["kind"],
                                     amplitude=d["amplitude"], width_s=d["width_s"],
                                     start_s=d["start_s"], at="input", dt_s=t_end / self.steps)
        except ValueError as exc:
            log.debug("%s: no disturbance response predicted: %s", item.rule, exc)
            return
        item.response = self.metrics(r.t_s, r.y, r.u)

    def metrics(self, t, y, u) -> DisturbanceMetrics | None:
        if not np.all(np.isfinite(y)):
            return None
        return disturbance_metrics(t, y, band=self.band, command=u,
                                   command_limit=self.limit, t0_s=self.dist["start_s"])


def propose(run: RelayRun, *, margin_deg: float = 45.0, limits: RankLimits | None = None,
            ms_max: float | None = None, band_noise: float = 3.0, fit_cutoff_hz: float = 8.0,
            fit_ok: float = 0.05, df_tol_deg: float = 20.0,
            static_tol: float = 0.1) -> ProposalSet:
    """Proposals for the loop of a converged relay run (see the module docstring).
    ``ms_max`` (older callers) overrides ``limits.ms_max``."""
    if not run.converged or run.point is None:
        raise ValueError(f"no proposals: the relay test did not converge ({run.reason})")
    limits = limits or RankLimits()
    if ms_max is not None:
        limits = replace(limits, ms_max=ms_max)
    ls, an = run.loop, run.analysis
    band = band_noise * max(run.noise_rms or 0.0, 1e-12)
    notes: list[str] = []
    if ls.relay == "integral" or ls.plant == "unstable":
        return _propose_unstable(run, margin_deg, limits, band, fit_cutoff_hz, notes)
    kind = "integrating" if ls.plant == "integrating" else "lag"
    static = run.static_gain if kind == "lag" else None
    model = fit_process_model(run.points, kind=kind, static_gain=static)
    plant = model.plant_model()
    direct = model.gain < 0
    if "action" in ls.declared and ls.direct_acting != direct:
        notes.append(f"the board declares action={ls.action} for this loop but the relay "
                     f"test measured a plant gain of sign {'−' if direct else '+'}, which "
                     f"needs {'direct' if direct else 'reverse'} action: the predictions "
                     "follow the measurement")
    consistent = None
    if static is not None:
        # the model fitted to the frequency points alone must agree with the measured
        # static gain; a right-half-plane zero, say, makes the points look like another gain
        free = fit_process_model(run.points, kind=kind, static_gain=None)
        off = abs(free.gain / static - 1.0) if static else math.inf
        consistent = off <= static_tol
        if not consistent:
            notes.append(f"MODEL INCONSISTENT WITH THE DATA: fitted to the frequency points "
                         f"alone its static gain is {free.gain:.4g}, the biased relay "
                         f"measured ∫y/∫u = {static:.4g} ({100 * off:.0f}% off, > "
                         f"{100 * static_tol:g}%); the model below is held to the measured "
                         "gain, and its predicted margins are doubtful")
    elif static is None and kind == "lag":
        notes.append("static gain not measured (unbiased relay): the model's gain comes from "
                     "the points alone and can be far off on a plant with a right-half-plane "
                     "zero; run with --bias to check it (docs/METHODS.md §3)")
    point = run.point
    off = abs(((point.phase_deg + (180.0 if direct else 0.0)) + 180.0 + 180.0) % 360.0 - 180.0)
    mu = _model_ultimate(plant, point.omega_rad_s, direct) if model.fit_rms <= fit_ok else None
    ult = None
    h = run.board.dt_s if run.board else None
    sampled = _sampled_ultimate(plant, h, direct) if mu is not None and h else None
    if sampled is not None:
        ult = {"ku": sampled[0], "tu_s": sampled[1],
               "continuous": {"ku": mu[0], "tu_s": mu[1]},
               "sampled": {"ku": sampled[0], "tu_s": sampled[1]},
               "source": f"fitted model's −180° crossing in the loop sampled at the board's "
                         f"rate (measured point {off:.1f}° away; continuous Ku {mu[0]:.4g}, "
                         f"Tu {mu[1]:.4g} s)"}
    elif mu is not None:
        ult = {"ku": mu[0], "tu_s": mu[1], "continuous": {"ku": mu[0], "tu_s": mu[1]},
               "source": f"fitted model's −180° crossing (measured point {off:.1f}° away)"}
    elif off <= 3.0:
        ult = {"ku": 1.0 / point.gain, "tu_s": point.period_s,
               "source": f"measured point ({off:.1f}° from −180°)"}
    elif off <= df_tol_deg and run.ku is not None:
        ult = {"ku": run.ku, "tu_s": run.tu_s,
               "source": f"describing function, cycle {off:.1f}° from −180° (docs/METHODS.md §3: "
                         "−4…−18% on Ku with hysteresis)"}
    if ult is not None:
        raw = propose_from_ultimate(ult["ku"], ult["tu_s"], static_gain=static,
                                    plant=ls.plant, margin_deg=margin_deg, point=point,
                                    direct_acting=direct)
    else:  # the rules say why they do not apply; the one-point designs still do
        ult = {"ku": None, "tu_s": None,
               "source": f"none: the cycle sat {off:.1f}° from −180° (a wide hysteresis) and "
                         "the model has no −180° crossing within 5× of its frequency"}
        raw = propose_from_point(point, static_gain=static, plant=ls.plant,
                                 margin_deg=margin_deg, direct_acting=direct)
        notes.append("the ultimate-point rules need a cycle near −180°: run with a smaller "
                     "--hysteresis (or a longer dead time in the loop) to use them")
    if model.fit_rms > fit_ok:
        notes.append(f"the model fits the measured points poorly ({100 * model.fit_rms:.0f}% "
                     "rms): predicted margins are rough")
    d_amp = run.settings.amplitude if run.settings else 1.0
    dist = {"kind": "step", "amplitude": d_amp, "width_s": 0.0, "start_s": 0.0,
            "t_end_s": 30.0 * (an.period_s or 1.0), "at": "input"}
    judge = _Judge(run, plant, direct, band, dist)
    items = [_from_proposal(p, ls) for p in raw]
    for it in items:
        if it.rule.startswith("astrom-hagglund"):
            it.details["target_margin_deg"] = margin_deg
        judge.rate(it)
    current = _current(run, judge)
    judge_and_rank(items, limits, params=run.board.params if run.board else None,
                   unstable_plant=False)
    return ProposalSet(ls, kind, model.describe(), model, plant, direct, ult, current, items,
                       dist, notes, limits, static_consistent=consistent)


def _current(run: RelayRun, judge: _Judge) -> Rated | None:
    if run.board is None:
        return None
    vals = [run.board.value(g) for g in run.loop.gains]
    if any(v is None for v in vals):
        return None
    kp, ki, kd = vals
    cur = Rated("current", "PID", True, "", "the board's gains before the test", "",
                dict(zip(run.loop.gains, vals)), kp, ki, kd,
                ParallelPid(kp, ki, kd).to_ideal() if kp else None)
    judge.rate(cur)
    return cur


def _propose_unstable(run, margin_deg, limits, band, cutoff_hz, notes) -> ProposalSet:
    ls, an, board = run.loop, run.analysis, run.board
    model, why = fit_from_run(run, cutoff_hz=cutoff_hz)
    plant = board_plant(model, ls) if model is not None else None
    direct = ls.direct_acting if plant is None else plant.num[0] / plant.den[0] < 0
    if model is None:
        notes.append(f"no model: {why}; margins cannot be predicted")
    # the output's swing in the relay test sizes the simulated disturbance
    res = run.experiment
    sl = res.window(an.t_start_s, an.t_end_s)
    swing = 0.5 * float(np.ptp(res.column(ls.output)[sl])) if sl.stop > sl.start else 1.0
    dist = {"kind": "pulse", "amplitude": swing, "width_s": an.period_s / 4, "start_s": 0.0,
            "t_end_s": 15.0 * an.period_s, "at": "input"}
    corners = []
    if model is not None:
        corners = [board_plant(m, ls) for m in box_corners(
            model, {"a": model.a_sigma, "c_prime": model.c_prime_sigma,
                    "tau_e_s": model.tau_e_sigma_s if model.tau_e_s else 0.0},
            make=lambda **kw: replace(model, **kw))]
    judge = _Judge(run, plant, direct, band, dist, corners=corners,
                   missing="" if model is not None else why)
    items = [_from_proposal(p, ls) for p in
             propose_from_point(run.point, plant="unstable", margin_deg=margin_deg,
                                direct_acting=direct)]
    for it in items:
        if it.rule.startswith("astrom-hagglund"):
            it.details["target_margin_deg"] = margin_deg
    scale = si_factor(ls.measure_unit) / si_factor(ls.output_unit)  # SI gain -> board gain
    for kind in ("PI", "PID"):
        rule = f"pole-placement-{kind.lower()}"
        if model is None:
            items.append(Rated(rule, kind, False, f"needs the balance model ({why})", "", "",
                               {}, None, None, None, None))
            continue
        items.append(_from_proposal(design_pole_placement(model, kind=kind), ls, scale))
    items.append(_lqr_item(model, why, ls, board, judge))
    for it in items:
        if it.rule != "lqr-nearest-pid":
            judge.rate(it)
    current = _current(run, judge)
    judge_and_rank(items, limits, params=board.params if board else None,
                   unstable_plant=True)
    text = "none"
    if model is not None:
        text = (f"a = {model.a:.4g} ± {model.a_sigma:.2g} rad/s, c' = {model.c_prime:.4g}, "
                f"offset {math.degrees(model.offset_rad):.3g}°, "
                + (f"driver lag {model.tau_e_s * 1e3:.3g} ms, " if model.tau_e_s else "")
                + f"dead time {model.delay_samples} sample(s)")
    return ProposalSet(ls, f"balance-{model.drive}" if model else "none", text, model, plant,
                       direct, {"ku": None, "tu_s": an.period_s,
                                "source": "no ultimate point: open-loop unstable"},
                       current, items, dist, notes, limits,
                       "" if model is not None else str(why))


def _lqr_item(model, why, ls, board, judge: _Judge) -> Rated:
    rule = "lqr-nearest-pid"
    if model is None:
        return Rated(rule, "PID", False, f"needs the balance model ({why})", "", "", {}, None,
                     None, None, None)
    try:
        g = lqr_board_gains(model, ls, board)
    except (ValueError, np.linalg.LinAlgError) as exc:
        return Rated(rule, "PID", False, f"LQR design failed: {exc}", "", "", {}, None, None,
                     None, None)
    src = g.design.pid.source
    if g.reason:
        return Rated(rule, "PID", False, g.reason, src, g.design.pid.notes, {}, None, None,
                     None, None)
    gains = {ls.gains[0]: g.kp, ls.gains[1]: 0.0, ls.gains[2]: g.kd, **g.trim}
    item = Rated(rule, "PID", True, "", src, g.design.pid.notes + "; margins with the loop "
                 "broken at the plant input (state feedback)", gains, g.kp, 0.0, g.kd,
                 ParallelPid(g.kp, 0.0, g.kd).to_ideal(), g.margins, g.margins.stable,
                 details={"trim_loop": g.trim_loop, "trim": g.trim})
    if item.predicted_stable:
        d = judge.dist
        f_out, f_in = si_factor(ls.output_unit), si_factor(ls.measure_unit)
        t, th, u = simulate_state_feedback(g.design, t_end_s=d["t_end_s"],
                                           amplitude_si=d["amplitude"] * f_out,
                                           width_s=d["width_s"], start_s=d["start_s"])
        item.response = judge.metrics(t, th / f_in, u / f_out)
    return item
