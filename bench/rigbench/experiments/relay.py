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
   **Sizing** (relaysession.RelaySession.sizing): start small (``start_fraction`` of
   ``<output>_limit`` for output relays, ``target_snr``·noise for integral relays) with
   a band of ``probe_noise`` × noise RMS, so noise cannot switch the relay while the
   plant is still in its dead time; wait for two whole cycles (up to ``first_cycles_s``
   at the first setting, then ``attempt_periods`` of the cycle's own period). The
   amplitude grows only when the oscillation is below ``target_snr`` × noise RMS, or when
   the measure stalled inside the band without a switch, never beyond the output's
   limit or an oscillation of ``max_oscillation_fraction`` of the measure's guard; each
   setting tried and why is kept in ``settings.attempts``. Then the band drops to the
   documented ``hysteresis_noise`` × noise RMS. When the cycles are shorter than
   ``min_period_samples`` telemetry samples, or the oscillation did not grow with the
   amplitude (a plant with little phase lag, where the band sets the cycle), the band
   grows ×3 instead, up to the target oscillation, and ``settings.hysteresis_reason``
   says so: the cycle then sits at −180° + arcsin(ε/a) (docs/METHODS.md §3), which the
   exact point accounts for.
3. **Convergence** (RelayTracker, rigbench.tuning.cycles): after discarding the first
   cycle, the last ``cycles`` cycles no longer drift — the change of period and amplitude
   along a line fitted across them is within ``tol``, the period's resolution (1.5 loop
   samples: the board switches at its samples) or three standard errors of the
   cycle-to-cycle noise, whichever is largest; a series whose changes all go one way
   gets no noise allowance — and scatter by less than 25%; else give up after
   ``budget_periods`` periods (or at ``max_s``) with the tracker's reason. Noise-limited cycles (a band set wide by
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
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np

from rigbench.tuning.point import FrequencyPoint
from rigbench.tuning.relay import RelayResult, rising_switches

from rigbench.experiments.conventions import BoardView, LoopSignals, board_view, loop_signals
from rigbench.experiments.pointmodel import harmonic_points
from rigbench.experiments.relaysession import RelayAttempt, RelaySession, RelaySettings, columns, \
    noise_rms
from rigbench.experiments.runner import Experiment, ExperimentResult, Guards

__all__ = ["run_relay", "RelayConfig", "RelayRun", "RelaySettings", "RelayAttempt",
           "noise_rms"]


@dataclass(frozen=True)
class RelayConfig:
    """Settings of a relay test; amplitudes in the output's units (integral relays: the
    measure's), hysteresis in the measure's units, times in s. None: sized automatically
    (amplitude, hysteresis) or no cap (``max_s``)."""

    amplitude: float | None = None
    hysteresis: float | None = None
    bias: float = 0.0
    max_s: float | None = None          # caps sizing + cycling when given
    cycles: int = 4
    settle_s: float = 2.0
    quiet_s: float = 1.0
    target_snr: float = 20.0            # oscillation / noise RMS the sizing aims for
    hysteresis_noise: float = 2.0       # band = this × noise RMS (METHODS §3)
    probe_noise: float = 5.0            # band before the first cycle, × noise RMS
    start_fraction: float = 0.02
    max_oscillation_fraction: float = 0.3
    bound_fraction: float = 0.5
    tol: float = 0.02
    discard_cycles: int = 1
    excite: bool = True
    excite_fraction: float = 0.05
    min_period_samples: int = 25
    drift_correction: bool = True
    first_cycles_s: float = 180.0       # wait for the first two cycles at the first setting
    attempt_periods: float = 6.0        # later sizing waits, in periods
    budget_periods: float = 24.0        # the convergence wait, in periods
    stall_min_s: float = 10.0           # earliest "stalled inside the band" decision

    def __post_init__(self):
        if self.amplitude is not None and not self.amplitude > 0:
            raise ValueError("amplitude must be positive")
        if self.hysteresis is not None and not self.hysteresis >= 0:
            raise ValueError("hysteresis must be >= 0")
        if self.max_s is not None and not self.max_s > 0:
            raise ValueError("max_s must be positive")
        if self.cycles < 1 or self.discard_cycles < 0:
            raise ValueError("cycles >= 1, discard_cycles >= 0")
        for name in ("first_cycles_s", "attempt_periods", "budget_periods", "target_snr",
                     "probe_noise"):
            if not getattr(self, name) > 0:
                raise ValueError(f"{name} must be positive")


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
    config: RelayConfig | None = None

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


_CONFIG_FIELDS = {f.name for f in fields(RelayConfig)}


def run_relay(link, loop: str, config: RelayConfig | None = None, *, cancel=None,
              progress=None, results_dir=None, guards: Guards | None = None,
              **overrides) -> RelayRun:
    """Relay test on ``loop`` (see the module docstring). ``overrides`` are RelayConfig
    fields (None values are ignored for fields whose default is not None). Raises
    ArmRefused if the board's interlock refuses to arm, ValueError for a loop or
    settings the board cannot take."""
    unknown = set(overrides) - _CONFIG_FIELDS
    if unknown:
        raise TypeError(f"run_relay: unknown settings {sorted(unknown)}")
    base = config or RelayConfig()
    overrides = {k: v for k, v in overrides.items()
                 if v is not None or getattr(RelayConfig, k, None) is None}
    cfg = replace(base, **overrides)
    ls = loop_signals(link, loop)
    board = board_view(link)
    if ls.relay == "integral" and ls.relay_signal is None:
        raise ValueError(f"loop {loop!r} runs an integral relay but the board streams no "
                         "'relay' signal to show its state")
    if ls.relay == "output" and cfg.amplitude is None and ls.output_limit is None:
        raise ValueError(f"give the relay amplitude: the board declares no output limit "
                         f"(limit= in the loop reply, or a parameter {ls.output}_limit) to "
                         "size it from")
    exp = Experiment(link, name=f"relay {loop}", guards=guards, cancel=cancel,
                     progress=progress, results_dir=results_dir)
    with exp:
        ses = RelaySession(exp, ls, cfg)
        ses.noise_hold()
        if ses.sizing() and ses.cycling():
            ses.wrap_up()
    res = exp.result
    stop, reason = ses.stop, ses.reason
    if res.stopped_by != "done":
        stop, reason = res.stopped_by, res.detail
    an, points = _exact_points(ses, res, cfg.drift_correction)
    relay_s = None if ses.t_relay is None or ses.t_conv is None else ses.t_conv - ses.t_relay
    return RelayRun(loop=ls, stopped_by=stop, reason=reason, settings=ses.settings,
                    noise_rms=ses.sigma, operating_output=ses.u0, operating_measure=ses.y0,
                    analysis=an, points=points, rig_seconds=res.ended_s - res.started_s,
                    relay_seconds=relay_s, fit_window=ses.fit, experiment=res, board=board,
                    config=cfg)


def _exact_points(ses: RelaySession, res: ExperimentResult, drift_correction: bool):
    """(analysis with the drift-corrected point, [G(jω), G(3jω)]) over the cycles used."""
    an = ses.analysis
    if an is None or an.point is None or an.t_start_s is None:
        return an, []
    s = ses.settings
    r, u, y = columns(ses.ls, res.signals, res.values, s.centre, s.bias, ses.y0)
    sl = res.window(an.t_start_s, an.t_end_s)
    bounds = res.t_s[sl][rising_switches(r[sl])]
    bounds = np.r_[an.t_start_s, bounds[bounds > an.t_start_s + 1e-9]]
    try:
        points = harmonic_points(res.t_s, u, y, t_start_s=an.t_start_s,
                                 t_end_s=an.t_end_s, cycles=an.cycles,
                                 boundaries_s=bounds if drift_correction else None)
    except ValueError:
        return an, [an.point]
    return replace(an, point=points[0]), points

