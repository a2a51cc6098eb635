"""Relay autotune on a live board: the experiment (board modes, sizing, convergence) around
the analysis of rigbench.tuning.relay.

``run_relay(link, loop)`` runs, under the guarded runner (runner.py):

1. **Quiet hold**: closed loop with the current gains for ``settle_s``, then ``quiet_s``
   to measure the noise RMS of the loop's error (measure minus set-point signal where the
   board streams one; linear trend removed) and the operating point (mean output and
   measure). Hysteresis defaults to ``hysteresis_noise`` × that RMS (docs/METHODS.md §3: ≈ 2×).
2. **Relay**, as the board declares for the loop (PROTOCOL.md §5.4, §8.1):
   ``relay=output`` (stable and integrating loops): the relay replaces the output,
   centred on the operating output, amplitude d in the output's units; ``relay=integral``
   (unstable loops, docs/METHODS.md §4): the stabilising controller stays in charge and the
   relay switches a set-point offset ±h fed to its integral only, h in the measure's units.
   **Automatic amplitude** (when ``amplitude`` is None): start small (``start_fraction``
   of ``<output>_limit`` for output relays, ``target_snr``·noise for integral relays),
   wait for ``regular_cycles`` cycles agreeing within ``regular_tol`` (noise makes the
   relay chatter while its first steps are in the dead time), and grow until the
   oscillation's half peak-to-peak reaches
   ``target_snr`` × noise RMS (METHODS: at least 10×), never beyond the output's limit or
   an oscillation of ``max_oscillation_fraction`` of the measure's guard. When the cycles
   are shorter than ``min_period_samples`` telemetry samples, or the oscillation did not
   grow with the amplitude (a plant with little phase lag, where the band sets the
   cycle), an automatic hysteresis grows ×3 instead, up to the target oscillation:
   the cycle then sits at −180° + arcsin(ε/a) (docs/METHODS.md §3), which the exact point
   accounts for.
3. **Convergence** (RelayTracker, rigbench.tuning.cycles): after discarding the first
   cycle, the last ``cycles`` cycles no longer drift — the change of period and amplitude
   along a line fitted across them is within ``tol``, the period's resolution (1.5 loop
   samples: the board switches at its samples) or three standard errors of the
   cycle-to-cycle noise, whichever is largest — and scatter by less than 25%; else give
   up at ``max_s`` with the tracker's reason. Noise-limited cycles (a band set wide by
   the automatic hysteresis) and cycles a few tens of samples long converge by this
   test; their scatter is reported with the result.
4. **Excitation for the model fit** (integral relays): back in hold, a set-point doublet
   (+A then −A, each ``1.25`` relay periods long, A = ``excite_fraction`` × trip limit).
   The fit window (``fit_window``) runs from the quiet hold to the end of the doublet.
   The relay alone excites one frequency well above the unstable pole, where the pole is
   hard to see; the doublet adds content at and below it (measured: the unstable-pole fit
   went from −2…−7% to within 1% on the demo rigs).

The plant point is the ratio of the fundamentals of the logged measure and output over
whole periods (exact for a linear plant); the third harmonic gives a second point, G(3jω),
used by the model fit of stable loops (pointmodel.py). With ``drift_correction`` a slow
linear drift through the cycle boundaries (an outer loop still settling) is removed from
both signals before the ratio (pointmodel.harmonic_points); the analysis' point is
replaced by this one. Gains are in the board's units:
point gain in (measure unit)/(output unit), ku in (output unit)/(measure unit); times in s.
For integral relays Ku from 4h/(πa) is not a controller gain, so ``ku`` is None.

Must not import: textual, rigbench.ui, rigbench.commands, control.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from rigbench.tuning.point import FrequencyPoint
from rigbench.tuning.relay import RelayResult, RelayTracker, rising_switches

from rigbench.experiments.conventions import BoardView, LoopSignals, board_view, loop_signals
from rigbench.experiments.pointmodel import harmonic_points
from rigbench.experiments.runner import Experiment, ExperimentResult, Guards

__all__ = ["run_relay", "RelayRun", "RelaySettings", "noise_rms"]


@dataclass
class RelaySettings:
    amplitude: float                # d (output relays, output units) or h (integral, measure)
    hysteresis: float               # measure units
    bias: float                     # relative to the centre
    centre: float                   # output relays: the operating output the relay is centred on
    bound: float | None             # the board trips when |measure − set-point| exceeds it
    automatic: bool                 # amplitude sized by the experiment
    attempts: list = field(default_factory=list)   # (amplitude, oscillation amplitude or None)


@dataclass
class RelayRun:
    """Result of :func:`run_relay`. ``stopped_by``: 'converged', 'gave_up' or a runner
    reason (guard, trip, stale, lost, reset, cancelled, error)."""

    loop: LoopSignals
    stopped_by: str
    reason: str
    settings: RelaySettings | None
    noise_rms: float | None
    operating_output: float | None
    operating_measure: float | None
    analysis: RelayResult | None
    points: list                    # FrequencyPoint at ω and 3ω
    rig_seconds: float              # link time of the whole experiment
    relay_seconds: float | None     # from the first relay mode to convergence
    fit_window: tuple | None        # (t0_s, t1_s) of data for a model fit
    experiment: ExperimentResult | None
    board: BoardView | None = None  # the board's declarations at the start

    @property
    def converged(self) -> bool:
        return self.stopped_by == "converged"

    @property
    def point(self) -> FrequencyPoint | None:
        return None if self.analysis is None else self.analysis.point

    @property
    def period_s(self) -> float | None:
        return None if self.analysis is None else self.analysis.period_s

    @property
    def tu_s(self) -> float | None:
        return self.period_s

    @property
    def ku(self) -> float | None:
        if self.analysis is None or self.loop.relay == "integral":
            return None
        return self.analysis.ku

    @property
    def static_gain(self) -> float | None:
        return None if self.analysis is None else self.analysis.static_gain


def noise_rms(x) -> float:
    """RMS of ``x`` about its straight-line trend."""
    x = np.asarray(x, dtype=float)
    if len(x) < 3:
        return 0.0
    n = np.arange(len(x))
    coef = np.polyfit(n, x, 1)
    return float(np.std(x - np.polyval(coef, n)))


def _regular(tracker: RelayTracker, n: int, tol: float) -> bool:
    """The last ``n`` cycles agree in period and amplitude within ``tol`` of their mean."""
    if len(tracker.periods) < n:
        return False
    for series in (tracker.periods[-n:], tracker.amplitudes[-n:]):
        x = np.asarray(series)
        m = float(np.mean(x))
        if m <= 0 or np.max(np.abs(x - m)) > tol * m:
            return False
    return True


def _columns(ls: LoopSignals, signals, values, centre: float, bias: float, y0: float):
    """(relay state, output deviation, measure deviation) from telemetry rows: deviations
    from the operating point of the quiet hold, as the static gain ∫y/∫u needs."""
    col = {name: values[:, i] for i, name in enumerate(signals)}
    u = col[ls.output] - centre
    y = col[ls.measure] - y0
    if ls.relay_signal:
        r = col[ls.relay_signal]
    else:  # an output relay shows its state in the output itself: u = centre + bias ± d
        r = np.sign(u - bias)
    return r, u, y


def run_relay(link, loop: str, *, amplitude: float | None = None,
              hysteresis: float | None = None, bias: float = 0.0, max_s: float = 60.0,
              cycles: int = 4, cancel=None, progress=None, results_dir=None,
              guards: Guards | None = None, settle_s: float = 2.0, quiet_s: float = 1.0,
              target_snr: float = 20.0, hysteresis_noise: float = 2.0,
              start_fraction: float = 0.02, max_oscillation_fraction: float = 0.3,
              bound_fraction: float = 0.5, tol: float = 0.02, discard_cycles: int = 1,
              excite: bool = True, excite_fraction: float = 0.05,
              regular_cycles: int = 3, regular_tol: float = 0.25,
              min_period_samples: int = 25, drift_correction: bool = True) -> RelayRun:
    """Relay test on ``loop`` (see the module docstring). Raises ArmRefused if the board's
    interlock refuses to arm, ValueError for a loop or settings the board cannot take."""
    ls = loop_signals(link, loop)
    board = board_view(link)
    if amplitude is not None and amplitude <= 0:
        raise ValueError("amplitude must be positive")
    if hysteresis is not None and hysteresis < 0:
        raise ValueError("hysteresis must be >= 0")
    if ls.relay == "integral" and ls.relay_signal is None:
        raise ValueError(f"loop {loop!r} runs an integral relay but the board streams no "
                         "'relay' signal to show its state")
    if ls.relay == "output" and amplitude is None and ls.output_limit is None:
        raise ValueError(f"give the relay amplitude: the board declares no output limit "
                         f"(limit= in the loop reply, or a parameter {ls.output}_limit) to "
                         "size it from")
    state = {"settings": None, "sigma": None, "u0": None, "y0": None, "analysis": None,
             "t_relay": None, "t_conv": None, "fit": None, "stop": None, "reason": ""}
    exp = Experiment(link, name=f"relay {loop}", guards=guards, cancel=cancel,
                     progress=progress, results_dir=results_dir)
    with exp:
        _run(exp, ls, state, amplitude=amplitude, hysteresis=hysteresis, bias=bias,
             max_s=max_s, cycles=cycles, settle_s=settle_s, quiet_s=quiet_s,
             target_snr=target_snr, hysteresis_noise=hysteresis_noise,
             start_fraction=start_fraction, max_osc=max_oscillation_fraction,
             bound_fraction=bound_fraction, tol=tol, discard=discard_cycles,
             excite=excite, excite_fraction=excite_fraction,
             regular_cycles=regular_cycles, regular_tol=regular_tol,
             min_period_samples=min_period_samples)
    res = exp.result
    stop, reason = state["stop"], state["reason"]
    if res.stopped_by != "done":
        stop, reason = res.stopped_by, res.detail
    points = []
    an = state["analysis"]
    if an is not None and an.point is not None and an.t_start_s is not None:
        s = state["settings"]
        r, u, y = _columns(ls, res.signals, res.values, s.centre, s.bias, state["y0"])
        sl = res.window(an.t_start_s, an.t_end_s)
        bounds = res.t_s[sl][rising_switches(r[sl])]
        bounds = np.r_[an.t_start_s, bounds[bounds > an.t_start_s + 1e-9]]
        try:
            points = harmonic_points(res.t_s, u, y, t_start_s=an.t_start_s,
                                     t_end_s=an.t_end_s, cycles=an.cycles,
                                     boundaries_s=bounds if drift_correction else None)
            an = replace(an, point=points[0])
        except ValueError:
            points = [an.point]
    t_rel = state["t_relay"]
    return RelayRun(ls, stop or "gave_up", reason, state["settings"], state["sigma"],
                    state["u0"], state["y0"], an, points, res.ended_s - res.started_s,
                    None if t_rel is None or state["t_conv"] is None
                    else state["t_conv"] - t_rel, state["fit"], res, board)


def _run(exp: Experiment, ls: LoopSignals, st: dict, *, amplitude, hysteresis, bias, max_s,
         cycles, settle_s, quiet_s, target_snr, hysteresis_noise, start_fraction, max_osc,
         bound_fraction, tol, discard, excite, excite_fraction, regular_cycles,
         regular_tol, min_period_samples) -> None:
    budget = max_s + settle_s + quiet_s
    exp.hold()
    exp.report("settling", budget_s=budget, fraction=0.0, force=True,
               message="closed loop, letting the rig settle")
    exp.wait(settle_s)
    t_quiet = exp.mark("quiet")
    exp.wait(quiet_s)
    t, v = exp.data()
    sel = t >= t_quiet
    col = {n: v[sel, i] for i, n in enumerate(exp.signals)}
    e = col[ls.measure] - (col[ls.setpoint] if ls.setpoint else 0.0)
    sigma = noise_rms(e)
    st["sigma"], st["u0"], st["y0"] = sigma, float(np.mean(col[ls.output])), \
        float(np.mean(col[ls.measure]))
    scale = ls.trip or max(abs(st["y0"]), 1.0)
    hyst = hysteresis if hysteresis is not None else max(hysteresis_noise * sigma, 1e-9 * scale)
    target = target_snr * max(sigma, 1e-6 * scale)
    guard = exp.limits.get(ls.measure)
    osc_cap = max_osc * guard if guard else math.inf
    if ls.relay == "output":
        centre = st["u0"]
        d_max = (ls.output_limit - abs(centre)) if ls.output_limit else math.inf
        d = amplitude if amplitude is not None else start_fraction * ls.output_limit
        mode_bias = centre + bias
    else:
        centre = st["u0"]
        d_max = 0.25 * ls.trip if ls.trip else math.inf
        d = amplitude if amplitude is not None else target
        mode_bias = bias
    if d > d_max and (amplitude is None or ls.relay == "output"):
        raise ValueError(f"relay amplitude {d:g} exceeds what the output allows ({d_max:g})")
    bound = bound_fraction * ls.trip if ls.trip else None
    settings = RelaySettings(d, hyst, bias, centre, bound, amplitude is None)
    st["settings"] = settings
    an_bias = bias if ls.relay == "output" else 0.0
    t_start = exp.elapsed_s()
    st["t_relay"] = exp.link.now()
    attempt_s = max_s / 4.0
    prog = {"tracker": None}

    cur = {"hyst": hyst}
    auto_hyst = hysteresis is None
    hyst_max = target
    min_period_s = min_period_samples / exp.stream_actual_hz

    def start(d_now: float) -> RelayTracker:
        fields = dict(loop=ls.name, amp=d_now, hyst=cur["hyst"], bias=mode_bias)
        if bound is not None:
            fields["bound"] = bound
        exp.mode("relay", **fields)
        settings.amplitude, settings.hysteresis = d_now, cur["hyst"]
        tr = RelayTracker(amplitude=d_now, hysteresis=cur["hyst"], bias=an_bias,
                          discard_cycles=discard, tol=tol, min_cycles=cycles)
        prog["tracker"] = tr
        return tr

    def feed(t_blk, vals):
        r, u, y = _columns(ls, exp.signals, vals, centre, bias, st["y0"])
        p = prog["tracker"].feed(t_blk, r, u, y)
        done = max(p.cycles - discard, 0)
        est = {"period_s": p.period_s, "amplitude": p.amplitude,
               "ku": p.ku if ls.relay == "output" else None,
               "period_change": p.period_change, "amplitude_change": p.amplitude_change,
               "period_scatter": p.period_scatter, "amplitude_scatter": p.amplitude_scatter}
        exp.report("relay", budget_s=budget, cycles=done, cycles_needed=cycles,
                   fraction=min(1.0, max(done / cycles, (exp.elapsed_s() - t_start) / budget)),
                   estimate=est, message=f"relay amplitude {settings.amplitude:.4g}")

    tracker = start(d)
    # -- automatic sizing: grow the amplitude until the oscillation stands well above the
    # noise. Only regular cycles count: while the relay's first steps are still in the
    # plant's dead time, noise makes it chatter with short, random cycles. Cycles a few
    # samples long, or an oscillation that did not grow with the amplitude, mean a plant
    # with little phase lag (first order, say): there the band, not the amplitude, sets
    # the cycle, so the hysteresis grows instead (up to the target oscillation).
    while amplitude is None:
        t_att = exp.elapsed_s()
        regular = exp.wait(min(attempt_s, max_s - (exp.elapsed_s() - t_start)),
                           until=lambda: _regular(tracker, regular_cycles, regular_tol),
                           on_block=feed)
        a = float(np.mean(tracker.amplitudes[-2:])) if regular else None
        settings.attempts.append((d, a))
        if a is not None and (a >= target or a >= osc_cap):
            break
        periods = tracker.periods[-regular_cycles:]
        chatter = bool(periods) and float(np.mean(periods)) < min_period_s
        before = cur.get("last")
        cur["last"] = (d, cur["hyst"], a)
        # the amplitude grew but the oscillation did not: the band sets the cycle
        stuck = (before is not None and a is not None and before[2] is not None
                 and before[1] == cur["hyst"] and d > 1.4 * before[0] and a < 1.2 * before[2])
        if exp.elapsed_s() - t_start >= max_s:
            if a is None:
                st["stop"], st["reason"] = "gave_up", (
                    f"no regular relay cycle within {exp.elapsed_s() - t_att:.1f} s")
                return
            break
        if auto_hyst and (chatter or stuck) and cur["hyst"] < hyst_max:
            cur["hyst"] = min(3.0 * cur["hyst"], hyst_max)
            tracker = start(d)
            continue
        if d >= d_max:
            if a is None:
                st["stop"], st["reason"] = "gave_up", (
                    f"no regular relay cycle within {exp.elapsed_s() - t_att:.1f} s at the "
                    f"largest amplitude allowed ({d:.4g})")
                return
            break  # keep the largest amplitude allowed; the noise ratio is reported
        if a is None:
            grow = 4.0 if not tracker.periods else 2.0
        else:
            grow = min(max(1.3 * target / a, 1.5), 4.0)
        d_new = min(d * grow, d_max)
        if a is not None and osc_cap < math.inf:
            d_new = min(d_new, d * osc_cap / a)
        if d_new <= d * 1.01:
            break
        d = d_new
        tracker = start(d)
    # -- run until the cycles no longer drift (the tracker's test allows for noise and
    # for the period's resolution of one loop sample)
    left = max_s - (exp.elapsed_s() - t_start)
    settled = exp.wait(max(left, 0.0), until=lambda: tracker.progress().settled,
                       on_block=feed)
    an = tracker.result()
    st["analysis"] = an
    if not (settled and an.converged):
        st["stop"] = "gave_up"
        st["reason"] = (f"no sustained cycle within {max_s:g} s: "
                        f"{an.reason or 'cycles did not agree'}")
        return
    st["t_conv"] = exp.link.now()
    st["stop"], st["reason"] = "converged", ""
    t_fit0 = t_quiet  # all of it is closed-loop data of the free rig: more to fit
    if ls.relay == "integral" and excite and ls.trip:
        exp.mode("hold")
        period = an.period_s
        amp = excite_fraction * ls.trip
        width = round(1.25 * period, 3)
        exp.report("excitation", budget_s=budget, fraction=1.0, force=True,
                   message="set-point doublet for the model fit")
        exp.wait(2 * period)
        for sign in (1.0, -1.0):
            exp.mode("inject", loop=ls.name, shape="pulse", at="setpoint",
                     amp=sign * amp, time_s=width)
            exp.wait(width + 4 * period)
    st["fit"] = (t_fit0, exp.link.now())
