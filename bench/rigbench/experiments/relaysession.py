"""The relay experiment's state machine, one method per phase (docs/METHODS.md §3):
noise hold, sizing, cycling (with the convergence test), wrap-up. Driven by
rigbench.experiments.relay.run_relay, which builds the result; configuration in
rigbench.experiments.relay.RelayConfig.

Time budget in periods: the only waits in seconds are the settle/quiet hold and the wait
for the first whole cycles at the first amplitude (``first_cycles_s``); once a cycle has
been seen, every later wait is a number of the cycles' own periods. ``max_s`` caps the
whole relay (sizing and cycling) when given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from rigbench.tuning.relay import RelayTracker

from rigbench.experiments.conventions import LoopSignals
from rigbench.experiments.runner import Experiment

__all__ = ["RelayAttempt", "RelaySession", "RelaySettings", "columns", "noise_rms"]


@dataclass(frozen=True)
class RelayAttempt:
    """One relay setting tried while sizing: what it gave and why the next was chosen.
    ``oscillation`` is the half peak-to-peak of the measure (None: no whole cycle)."""

    amplitude: float
    hysteresis: float
    period_s: float | None
    oscillation: float | None
    outcome: str                    # 'kept', or why the setting was changed / the run ended


@dataclass
class RelaySettings:
    amplitude: float                # d (output relays, output units) or h (integral, measure)
    hysteresis: float               # measure units
    bias: float                     # relative to the centre
    centre: float                   # output relays: the operating output the relay is centred on
    bound: float | None             # the board trips when |measure − set-point| exceeds it
    automatic: bool                 # amplitude sized by the experiment
    attempts: list = field(default_factory=list)   # RelayAttempt, in order
    noise_rms: float | None = None
    hysteresis_reason: str = ""     # why the band is not hysteresis_noise × noise RMS

    @property
    def hysteresis_noise_ratio(self) -> float | None:
        if not self.noise_rms:
            return None
        return self.hysteresis / self.noise_rms


def noise_rms(x) -> float:
    """RMS of ``x`` about its straight-line trend."""
    x = np.asarray(x, dtype=float)
    if len(x) < 3:
        return 0.0
    n = np.arange(len(x))
    coef = np.polyfit(n, x, 1)
    return float(np.std(x - np.polyval(coef, n)))


def columns(ls: LoopSignals, signals, values, centre: float, bias: float, y0: float):
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


class RelaySession:
    """State of one relay experiment on an entered :class:`Experiment`."""

    def __init__(self, exp: Experiment, ls: LoopSignals, cfg) -> None:
        self.exp, self.ls, self.cfg = exp, ls, cfg
        self.sigma = self.u0 = self.y0 = None
        self.settings = None            # RelaySettings, once the relay starts
        self.attempts: list[RelayAttempt] = []
        self.notes: list[str] = []
        self.analysis = None
        self.t_quiet = self.t_relay = self.t_conv = self.t_start = None
        self.fit = None
        self.stop, self.reason = "gave_up", ""
        self.tracker: RelayTracker | None = None
        self.period_s: float | None = None    # the latest whole cycle's period
        self.budget_s = cfg.settle_s + cfg.quiet_s + (cfg.max_s or 0.0)

    # ------------------------------------------------------------------ phases

    def noise_hold(self) -> None:
        """Closed loop with the current gains: settle, then measure the noise RMS of the
        error and the operating point."""
        exp, ls, cfg = self.exp, self.ls, self.cfg
        exp.hold()
        exp.report("settling", budget_s=self.budget_s or None, fraction=0.0, force=True,
                   message="closed loop, letting the rig settle")
        exp.wait(cfg.settle_s)
        self.t_quiet = exp.mark("quiet")
        exp.wait(cfg.quiet_s)
        t, v = exp.data()
        sel = t >= self.t_quiet
        col = {n: v[sel, i] for i, n in enumerate(exp.signals)}
        e = col[ls.measure] - (col[ls.setpoint] if ls.setpoint else 0.0)
        self.sigma = noise_rms(e)
        self.u0 = float(np.mean(col[ls.output]))
        self.y0 = float(np.mean(col[ls.measure]))

    def sizing(self) -> bool:
        """Find the relay amplitude and band; False when the run gave up (reason set).

        While no cycle has formed, the band is ``probe_noise`` × noise RMS (noise then
        cannot switch the relay while the plant is still in its dead time: with a 2σ band
        it chatters there, and those random cycles used to be taken for the oscillation).
        The amplitude grows only when the oscillation is below ``target_snr`` × noise, or
        when the measure stalled inside the band without a switch; never past the output's
        limit or an oscillation of ``max_oscillation_fraction`` of the measure's guard.
        """
        exp, ls, cfg, sigma = self.exp, self.ls, self.cfg, self.sigma
        scale = ls.trip or max(abs(self.y0), 1.0)
        sig = max(sigma, 1e-9 * scale)
        eps_doc = cfg.hysteresis if cfg.hysteresis is not None else cfg.hysteresis_noise * sig
        auto_band = cfg.hysteresis is None
        band = max(eps_doc, cfg.probe_noise * sig) if auto_band else eps_doc
        self.target = cfg.target_snr * max(sigma, 1e-6 * scale)
        guard = exp.limits.get(ls.measure)
        osc_cap = cfg.max_oscillation_fraction * guard if guard else math.inf
        if ls.relay == "output":
            d_max = (ls.output_limit - abs(self.u0)) if ls.output_limit else math.inf
            d = cfg.amplitude if cfg.amplitude is not None else cfg.start_fraction * ls.output_limit
            self.mode_bias = self.u0 + cfg.bias
        else:
            d_max = 0.25 * ls.trip if ls.trip else math.inf
            d = cfg.amplitude if cfg.amplitude is not None else self.target
            self.mode_bias = cfg.bias
        if d > d_max and (cfg.amplitude is None or ls.relay == "output"):
            raise ValueError(f"relay amplitude {d:g} exceeds what the output allows ({d_max:g})")
        bound = cfg.bound_fraction * ls.trip if ls.trip else None
        self.settings = RelaySettings(amplitude=d, hysteresis=band, bias=cfg.bias,
                                      centre=self.u0, bound=bound,
                                      automatic=cfg.amplitude is None, attempts=self.attempts,
                                      noise_rms=sigma, hysteresis_reason="")
        self.t_start = exp.elapsed_s()
        self.t_relay = exp.link.now()
        min_period_s = cfg.min_period_samples / exp.stream_actual_hz
        band_cap = max(self.target, band)
        last = None
        while True:
            self._start(d, band)
            got = self._wait_first_cycles()
            a = float(np.mean(self.tracker.amplitudes[-2:])) if got else None
            p = float(np.mean(self.tracker.periods[-2:])) if got else None
            if got:
                self.period_s = p
            chatter = got and p < min_period_s
            # the amplitude grew but the oscillation did not follow (a linear loop's would
            # grow in proportion; less than the square root of the ratio means the band,
            # not the phase, sets the cycle)
            stuck = (got and last is not None and last[2] is not None and last[1] == band
                     and d > 1.4 * last[0] and a < last[2] * math.sqrt(d / last[0]))
            last = (d, band, a)
            if self._out_of_time():
                self._attempt(d, band, p, a, "the time cap (max_s) ran out")
                return self._give_up(f"no sustained relay cycle within max_s = {cfg.max_s:g} s")
            if auto_band and (chatter or stuck) and band < band_cap:
                why = (f"cycle {p * exp.stream_actual_hz:.0f} samples long (< "
                       f"{cfg.min_period_samples}): the band sets the cycle" if chatter else
                       "the oscillation did not grow with the amplitude: the band sets it")
                self._attempt(d, band, p, a, f"band widened ×3: {why}")
                band = min(3.0 * band, band_cap)
                self.settings.hysteresis_reason = (
                    f"widened to {band / sig:.3g}× noise RMS ({why}); "
                    f"docs/METHODS.md §3")
                continue
            if got and (cfg.amplitude is not None or a >= self.target or a >= osc_cap):
                self._attempt(d, band, p, a, "kept")
                break
            if got:
                cause = (f"oscillation {a:.3g} is {a / sig:.3g}× the noise RMS, below the "
                         f"target {cfg.target_snr:g}×")
                grow = min(max(1.3 * self.target / a, 1.5), 4.0)
            elif self._stalled and cfg.amplitude is None:
                cause = ("the measure stalled inside the switching band: the response to "
                         "±d is smaller than the band")
                grow = 4.0
            else:
                why = ("no switch" if not self._switched else
                       f"{len(self.tracker.periods)} whole cycle(s)")
                self._attempt(d, band, p, a, f"gave up: {why} within {self._waited:.3g} s")
                return self._give_up(f"no regular relay cycle within {self._waited:.1f} s "
                                     f"at amplitude {d:.4g} ({why})")
            d_new = min(d * grow, d_max)
            if a is not None and osc_cap < math.inf:
                d_new = min(d_new, d * osc_cap / a)
            if d_new <= d * 1.01:
                if got:  # keep the largest amplitude allowed; the noise ratio is reported
                    self._attempt(d, band, p, a, f"kept at the largest amplitude allowed "
                                  f"({cause})")
                    break
                self._attempt(d, band, p, a, f"gave up: {cause}")
                return self._give_up(f"no relay cycle at the largest amplitude allowed "
                                     f"({d:.4g}): {cause}")
            self._attempt(d, band, p, a, f"amplitude ×{d_new / d:.3g}: {cause}")
            d = d_new
        # the documented band once the cycle is known: the probe band only kept the relay
        # from switching on noise before the first cycle
        if auto_band and band == max(eps_doc, cfg.probe_noise * sig) and band > eps_doc:
            if self.period_s >= 2 * min_period_s:
                band = eps_doc
                self._start(d, band)
            else:
                self.settings.hysteresis_reason = (
                    f"kept at {band / sig:.3g}× noise RMS: the cycle is only "
                    f"{self.period_s * exp.stream_actual_hz:.0f} samples long")
        return True

    def cycling(self) -> bool:
        """Run until the cycles no longer drift (rigbench.tuning.cycles), waiting up to
        ``budget_periods`` of the expected period; False when it gave up."""
        exp, cfg = self.exp, self.cfg
        wait_s = cfg.budget_periods * self.period_s
        if cfg.max_s is not None:
            wait_s = min(wait_s, cfg.max_s - (exp.elapsed_s() - self.t_start))
        settled = exp.wait(max(wait_s, 0.0), until=lambda: self.tracker.progress().settled,
                           on_block=self._feed)
        an = self.tracker.result()
        self.analysis = an
        if not (settled and an.converged):
            cap = (f"{cfg.budget_periods:g} periods ({wait_s:.3g} s)" if cfg.max_s is None
                   or wait_s < cfg.max_s else f"max_s = {cfg.max_s:g} s")
            return self._give_up(f"no sustained cycle within {cap}: "
                                 f"{an.reason or 'cycles did not agree'}")
        self.t_conv = exp.link.now()
        self.stop, self.reason = "converged", ""
        return True

    def wrap_up(self) -> None:
        """Integral relays: a set-point doublet for the model fit; the fit window."""
        exp, ls, cfg, an = self.exp, self.ls, self.cfg, self.analysis
        if ls.relay == "integral" and cfg.excite and ls.trip:
            exp.mode("hold")
            period = an.period_s
            amp = cfg.excite_fraction * ls.trip
            width = round(1.25 * period, 3)
            exp.report("excitation", budget_s=self.budget_s or None, fraction=1.0, force=True,
                       message="set-point doublet for the model fit")
            exp.wait(2 * period)
            for sign in (1.0, -1.0):
                exp.mode("inject", loop=ls.name, shape="pulse", at="setpoint",
                         amp=sign * amp, time_s=width)
                exp.wait(width + 4 * period)
        self.fit = (self.t_quiet, exp.link.now())

    # ------------------------------------------------------------------ helpers

    def _give_up(self, reason: str) -> bool:
        self.stop, self.reason = "gave_up", reason
        return False

    def _attempt(self, d, band, period, osc, outcome) -> None:
        self.attempts.append(RelayAttempt(d, band, period, osc, outcome))

    def _out_of_time(self) -> bool:
        cap = self.cfg.max_s
        return cap is not None and self.exp.elapsed_s() - self.t_start >= cap - 1e-9

    def _start(self, d: float, band: float) -> None:
        exp, ls, cfg = self.exp, self.ls, self.cfg
        fields = dict(loop=ls.name, amp=d, hyst=band, bias=self.mode_bias)
        if self.settings.bound is not None:
            fields["bound"] = self.settings.bound
        exp.mode("relay", **fields)
        self.settings.amplitude, self.settings.hysteresis = d, band
        self.tracker = RelayTracker(amplitude=d, hysteresis=band,
                                    bias=cfg.bias if ls.relay == "output" else 0.0,
                                    discard_cycles=cfg.discard_cycles, tol=cfg.tol,
                                    min_cycles=cfg.cycles)
        self._switched, self._stalled, self._r0 = False, False, None
        self._ext: list[tuple[float, float]] = []

    def _wait_first_cycles(self) -> bool:
        """Wait for two whole cycles: up to ``first_cycles_s`` before any cycle was seen,
        then ``attempt_periods`` of the last period; ends early when the measure stalls
        inside the band without a switch."""
        exp, cfg = self.exp, self.cfg
        t0 = exp.elapsed_s()
        wait_s = (cfg.first_cycles_s if self.period_s is None
                  else max(cfg.attempt_periods * self.period_s, 1.0))
        if cfg.max_s is not None:
            wait_s = min(wait_s, cfg.max_s - (t0 - self.t_start))

        def done() -> bool:
            if len(self.tracker.periods) >= 2:
                return True
            self._stalled = self._stall_check(exp.elapsed_s() - t0)
            return self._stalled

        got = exp.wait(max(wait_s, 0.0), until=done, on_block=self._feed)
        self._waited = exp.elapsed_s() - t0
        return got and len(self.tracker.periods) >= 2

    def _stall_check(self, elapsed_s: float) -> bool:
        """No switch yet, and the largest excursion of the measure has not grown by more
        than the noise over the second half of the wait (at least ``stall_min_s``)."""
        if self._switched or elapsed_s < self.cfg.stall_min_s or len(self._ext) < 4:
            return False
        t = np.array([e[0] for e in self._ext])
        x = np.array([e[1] for e in self._ext])
        half = np.searchsorted(t, t[-1] - 0.5 * elapsed_s)
        return float(x[-1] - x[min(half, len(x) - 1)]) < max(self.sigma, 0.02 * x[-1])

    def _feed(self, t_blk, vals) -> None:
        exp, ls, cfg, s = self.exp, self.ls, self.cfg, self.settings
        r, u, y = columns(ls, exp.signals, vals, s.centre, s.bias, self.y0)
        if len(r):
            if self._r0 is None:
                self._r0 = float(r[0])
            self._switched = self._switched or bool(np.any(r != self._r0))
            prev = self._ext[-1][1] if self._ext else 0.0
            self._ext.append((float(t_blk[-1]), max(prev, float(np.max(np.abs(y))))))
        p = self.tracker.feed(t_blk, r, u, y)
        done = max(p.cycles - cfg.discard_cycles, 0)
        est = {"period_s": p.period_s, "amplitude": p.amplitude,
               "ku": p.ku if ls.relay == "output" else None,
               "period_change": p.period_change, "amplitude_change": p.amplitude_change,
               "period_scatter": p.period_scatter, "amplitude_scatter": p.amplitude_scatter}
        budget = self.budget_s
        if not cfg.max_s and self.period_s:
            budget = (exp.elapsed_s() + cfg.budget_periods * self.period_s)
        exp.report("relay", budget_s=budget or None, cycles=done, cycles_needed=cfg.cycles,
                   fraction=min(1.0, done / cfg.cycles), estimate=est,
                   message=f"relay amplitude {s.amplitude:.4g}")
