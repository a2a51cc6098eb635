"""Disturbance sweep: for one or more gain sets, push each (one atomic ``set``), hold, inject
disturbances at several amplitudes, repeated, and compare docs/METHODS.md §5 metrics.

For each gain set, in hold: wait ``settle_s``; then for every amplitude and repeat an
``inject`` (PROTOCOL.md §8: ``shape`` pulse or step, ``at`` body, setpoint or output, the
amplitude in N.m for ``at=body``, else in the measure's/output's units), signs
alternating so the wheel does not wind up one way, each followed by ``settle_s`` of
recording (a step lasts that long, and its return is waited out before the next one).
Metrics per injection over [injection, injection + settle_s (+ pulse width)]
(rigbench.tuning.metrics.disturbance_metrics), on the loop's error: measure minus the streamed set-point signal when the board streams one (set-point
steps then give the tracking error), else the measure's deviation from its mean over the
``pre_s`` before the injection. The band is ``band_noise`` × the error's noise RMS in the
``pre_s`` window (at least ``band_min``). Per gain set: mean and spread per metric, over
all injections and per amplitude (rigbench.tuning.metrics.summarise).

**Every set is complete.** A parameter that one set states and another leaves out is taken
from one baseline — ``baseline`` when given (a profile's values, say), else the board's
values when the sweep starts — never from the set that ran before: a tilt-only set run
after a cascade set would otherwise inherit the cascade's trim gains. ``SetResult.values``
records the complete set that ran.

A **fall** (|measure| beyond its guard, or a board trip) kills the motor (runner.py) and
is recorded for that set; with ``rearm_after_fall`` the fault is cleared and the sweep
goes on with the next set once the board's interlock would allow arming again (within
``rearm_wait_s``: a person stands the rig up and the wheel runs down; on the simulated rig
a hand lifts it while the motor is off), otherwise the sweep stops there. Only a fall
re-arms: a signal beyond its guard or a board ``<signal>_limit`` trip. A kill a person
caused (the kill byte or framed kill from this or another program, a signal, the
watchdog) ends the sweep with the motor tripped, never re-armed. The original
values of every parameter a set changes are restored at the end, whatever happened.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from rigbench.link import BoardRefused, LinkError
from rigbench.tuning.metrics import DisturbanceMetrics, disturbance_metrics, summarise

from rigbench.experiments.conventions import loop_signals
from rigbench.experiments.relay import noise_rms
from rigbench.experiments.runner import Experiment, Guards

__all__ = ["GainSet", "gain_set", "Injection", "SetResult", "SweepResult", "run_sweep"]

KINDS = ("pulse", "step")
PLACES = ("body", "setpoint", "output")


@dataclass(frozen=True)
class GainSet:
    name: str
    values: dict                    # parameter -> value, board units


def gain_set(obj, name: str | None = None) -> GainSet:
    """A GainSet from a dict, a profile (``values()``), a proposal (``gains``) or a GainSet."""
    if isinstance(obj, GainSet):
        return obj if name is None else GainSet(name, dict(obj.values))
    if isinstance(obj, Mapping):
        values, default = dict(obj), "gains"
    elif callable(getattr(obj, "values", None)) and hasattr(obj, "gains"):   # a Profile
        values, default = obj.values(), getattr(obj, "name", "profile")
    elif isinstance(getattr(obj, "gains", None), Mapping):                  # a proposal
        values, default = dict(obj.gains), getattr(obj, "rule", "proposal")
    else:
        raise TypeError(f"cannot take gains from a {type(obj).__name__}")
    if not values:
        raise ValueError(f"gain set {name or default!r} is empty")
    return GainSet(name or default, {k: float(v) for k, v in values.items()})


@dataclass
class Injection:
    gain_set: str
    amplitude: float                # signed, as sent
    repeat: int
    t0_s: float
    metrics: DisturbanceMetrics | None
    fell: bool
    detail: str = ""


@dataclass
class SetResult:
    name: str
    values: dict
    applied: dict                   # as the board applied them
    injections: list = field(default_factory=list)
    fell: bool = False
    completed: bool = False
    detail: str = ""
    summary: dict = field(default_factory=dict)          # metric -> Spread
    by_amplitude: dict = field(default_factory=dict)     # |amplitude| -> metric -> Spread

    @property
    def mean_iae(self) -> float | None:
        s = self.summary.get("iae")
        return None if s is None else s.mean


@dataclass
class SweepResult:
    loop: str
    kind: str
    at: str
    amplitudes: tuple
    repeats: int
    sets: list
    stopped_by: str                 # done, fell, or a runner reason
    detail: str
    restored: dict
    experiments: list               # ExperimentResult of each stretch of running

    def by_name(self, name: str) -> SetResult:
        for s in self.sets:
            if s.name == name:
                return s
        raise KeyError(name)


def _pick_loop(link, sets: list[GainSet], loop: str | None) -> str:
    if loop is not None:
        return loop
    names = {k for s in sets for k in s.values}
    owning = [lp.name for lp in link.loops.values() if names & set(lp.gains)]
    unstable = [n for n in owning if link.loops[n].plant == "unstable"]
    if unstable:
        return unstable[0]
    if owning:
        return owning[-1]
    if len(link.loops) == 1:
        return next(iter(link.loops))
    raise ValueError("name the loop: the gain sets touch no loop's gains")


def run_sweep(link, gain_sets, *, loop: str | None = None, amplitudes=(0.02, 0.04),
              repeats: int = 3, kind: str = "pulse", at: str = "body", width_s: float = 0.1,
              settle_s: float = 2.0, pre_s: float = 0.5, alternate_sign: bool = True,
              band_noise: float = 3.0, band_min: float = 1e-6, rearm_after_fall: bool = False,
              rearm_wait_s: float = 10.0, baseline: Mapping[str, float] | None = None,
              cancel=None, progress=None, results_dir=None,
              guards: Guards | None = None) -> SweepResult:
    """Run the sweep (see the module docstring); returns a SweepResult."""
    if kind not in KINDS or at not in PLACES:
        raise ValueError(f"kind is one of {KINDS}; at is one of {PLACES}")
    amplitudes = tuple(float(a) for a in amplitudes)
    if not amplitudes or any(a <= 0 for a in amplitudes) or repeats < 1:
        raise ValueError("amplitudes must be positive and repeats >= 1")
    if width_s <= 0 or settle_s <= 0 or pre_s <= 0:
        raise ValueError("width_s, settle_s and pre_s must be positive")
    sets = [gain_set(s) if not isinstance(s, tuple) else gain_set(s[1], s[0])
            for s in gain_sets]
    if not sets:
        raise ValueError("give at least one gain set")
    names = [s.name for s in sets]
    if len(set(names)) != len(names):
        sets = [GainSet(f"{i + 1}:{s.name}", s.values) for i, s in enumerate(sets)]
    touched = sorted({k for s in sets for k in s.values})
    unknown = [k for k in touched if k not in link.params]
    if unknown:
        raise ValueError(f"the board has no parameter(s) {', '.join(unknown)}")
    loop = _pick_loop(link, sets, loop)
    ls = loop_signals(link, loop)
    original = link.get(*touched)
    base = {k: float(original[k]) for k in touched}
    if baseline is not None:
        base.update({k: float(v) for k, v in baseline.items() if k in base})
    sets = [GainSet(s.name, {**base, **s.values}) for s in sets]
    results = [SetResult(s.name, dict(s.values), {}) for s in sets]
    experiments, stop, detail = [], "done", ""
    total = len(sets) * len(amplitudes) * repeats
    counter = {"done": 0}
    pending = list(range(len(sets)))
    user_kills = link.user_kills
    try:
        while pending:
            current = {"i": None}
            exp = Experiment(link, name=f"sweep {loop}", guards=guards, cancel=cancel,
                             progress=progress, results_dir=results_dir)
            with exp:
                exp.hold()
                for i in list(pending):
                    current["i"] = i
                    _run_set(exp, ls, sets[i], results[i], amplitudes, repeats, kind, at,
                             width_s, settle_s, pre_s, alternate_sign, band_noise, band_min,
                             total, counter)
                    pending.remove(i)
            res = exp.result
            experiments.append(res)
            if res.stopped_by == "done":
                break
            i = current["i"]
            fell = i is not None and _is_fall(res)
            if fell:
                r = results[i]
                r.fell, r.detail = True, res.detail
                r.injections.append(Injection(r.name, float("nan"), -1, res.ended_s, None, True,
                                              res.detail))
                pending.remove(i)
            if fell and rearm_after_fall and pending and _rearm(link, rearm_wait_s, user_kills):
                continue
            stop, detail = ("fell" if fell else res.stopped_by), res.detail
            break
    finally:
        restored = {}
        try:
            restored = link.set(**original)
        except (LinkError, BoardRefused) as exc:
            detail = f"{detail}; could not restore the original gains: {exc}".strip("; ")
    for r in results:
        ms = [j.metrics for j in r.injections if j.metrics is not None]
        r.summary = summarise(ms) if ms else {}
        for a in amplitudes:
            sub = [j.metrics for j in r.injections
                   if j.metrics is not None and abs(abs(j.amplitude) - a) < 1e-12]
            if sub:
                r.by_amplitude[a] = summarise(sub)
    return SweepResult(loop, kind, at, amplitudes, repeats, results, stop, detail, restored,
                       experiments)


def _is_fall(res) -> bool:
    """The rig fell: a signal beyond its guard (the experiment killed), or the board tripped
    on a ``<signal>_limit``. A kill, the watchdog or any other cause is not a fall."""
    if res.stopped_by == "guard":
        return res.detail.startswith("|")
    if res.stopped_by == "trip":
        cause = res.detail.removeprefix("the board tripped: ").split(" ")[0]
        return cause.endswith("_limit")
    return False


def _rearm(link, wait_s: float, user_kills: int) -> bool:
    """Clear the fault and wait (up to ``wait_s``) until the interlock would allow arming:
    someone has to stand the rig up and the wheel has to run down first. Never after a
    person's kill (``link.user_kills`` grew) or with a kill latched that this fall did not
    explain; a kill during the wait leaves the motor tripped and ends the sweep."""
    if link.user_kills != user_kills:
        return False
    link.clear()
    ok = link.wait_until(lambda: link.user_kills != user_kills or (
        link.last_status is not None and link.last_status.motor == "off"
        and not link.last_status.why), wait_s)
    return ok and link.user_kills == user_kills and link.status().motor == "off"


def _run_set(exp: Experiment, ls, gs: GainSet, out: SetResult, amplitudes, repeats, kind, at,
             width_s, settle_s, pre_s, alternate, band_noise, band_min, total, counter) -> None:
    out.applied = exp.set(**gs.values)
    exp.mark(f"gain set {gs.name}")
    exp.wait(settle_s)
    guard = exp.limits.get(ls.measure)
    n = 0
    for a in amplitudes:
        for rep in range(repeats):
            sign = -1.0 if alternate and n % 2 else 1.0
            n += 1
            amp = sign * a
            time_s = width_s if kind == "pulse" else settle_s
            t0 = exp.link.now()
            exp.mode("inject", loop=ls.name, shape=kind, at=at, amp=amp, time_s=time_s)
            record_s = settle_s + (width_s if kind == "pulse" else 0.0)
            exp.wait(record_s)
            m = _metrics(exp, ls, t0, t0 + record_s, pre_s, band_noise, band_min, guard)
            if kind == "step":  # the step ends by itself: let it settle before the next
                exp.wait(settle_s)
            out.injections.append(Injection(gs.name, amp, rep, t0, m, bool(m and m.fell)))
            counter["done"] += 1
            exp.report("sweep", fraction=counter["done"] / total, force=True,
                       cycles=counter["done"], cycles_needed=total,
                       estimate={"iae": None if m is None else m.iae},
                       message=f"{gs.name}: amplitude {amp:g}, repeat {rep + 1}/{repeats}")
    out.completed = True


def _metrics(exp: Experiment, ls, t0: float, t1: float, pre_s: float, band_noise: float,
             band_min: float, guard) -> DisturbanceMetrics | None:
    t, v = exp.data()
    sel = (t >= t0 - pre_s) & (t <= t1 + 1e-9)
    t, v = t[sel], v[sel]
    col = {n: v[:, i] for i, n in enumerate(exp.signals)}
    y = col[ls.measure]
    before = t < t0
    if before.sum() < 3 or (~before).sum() < 3:
        return None
    e = y - col[ls.setpoint] if ls.setpoint else y - float(np.mean(y[before]))
    if ls.setpoint:
        e = e - float(np.mean(e[before]))  # a steady offset (trim, balance point) is not error
    band = max(band_noise * noise_rms(e[before]), band_min)
    return disturbance_metrics(t, e, band=band, wheel=col.get(ls.wheel) if ls.wheel else None,
                               command=col[ls.output], command_limit=ls.output_limit,
                               t0_s=t0, fall_threshold=guard)
