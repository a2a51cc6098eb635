"""The steps of a sequence run, one method per step kind (sequences/README.md), and the
guards and stop flag they share. rigbench.sequences.run drives them in order and ends the run.

- ``StepRunner(run)`` runs one step with ``run_step``, looking its method up in the table
  ``STEP_ACTIONS`` (step kind -> method). What it uses of the run is the ``RunState``
  protocol: the link, the sequence, the results folder, the result being filled, the
  latest relay/sweep metrics, the sweep's settings and the progress report.

- ``experiment_guards`` turns a step's guards (|tilt| in degrees, |wheel| as a fraction of
  ``trip_wheel``, stale telemetry) into rigbench.experiments guards in the board's units.
- ``StepStop`` is the cancel flag experiments see: the user's cancel or the step's
  ``timeout_s`` passing (link-clock time), whichever comes first.
- ``wait``, ``record``, ``relay`` and ``sweep`` run inside a guarded experiment
  (rigbench.experiments.runner.Experiment, or run_relay); an experiment stopped by a guard
  has already sent the kill. ``StepAbort`` carries the run's stop reason.
- ``relay`` runs rigbench.experiments.relay.run_relay with the step's amplitude, hysteresis,
  cycles and max_s; its ``bias`` is taken, as run_relay takes it, relative to the operating
  output measured in the quiet hold, and its ``bound`` goes to the board as a fraction of
  the loop's ``trip_<measure>`` (the board must declare one).
- The ``sweep`` step injects each amplitude as given (sign included) ``repeats`` times,
  ``spacing_s`` apart, from hold; metrics per push come from rigbench.sequences.stepdata.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

from rigbench.experiments.conventions import loop_signals
from rigbench.experiments.runner import Experiment
from rigbench.experiments.runner import Guards as ExperimentGuards
from rigbench.link import BoardRefused, LinkError
from rigbench.profiles.push import push_profile
from rigbench.base.stops import kills_motor
from rigbench.recordings.recording import Recorder
from rigbench.sequences.file import DEFAULT_STALE_S
from rigbench.sequences.stepdata import (
    push_record, relay_outcome, settled_tracker, sweep_metrics,
)
from rigbench.base.units import from_si, to_si
from rigbench.wire.describe import format_value

if TYPE_CHECKING:
    from rigbench.sequences.results import SequenceResult
    from rigbench.sequences.steps import Sequence

__all__ = ["StepRunner", "RunState", "STEP_ACTIONS", "StepAbort", "StepStop",
           "experiment_guards", "cancelled", "motor_state"]


class StepAbort(Exception):
    """Ends the run: ``reason`` is one of rigbench.sequences.results.STOP_REASONS."""

    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(f"{reason}: {detail}")
        self.reason, self.detail = reason, detail


def experiment_guards(link, guards) -> ExperimentGuards:
    """A sequence's guards (rigbench.sequences.steps.Guards) as an experiment's, in the board's
    units. Raises ValueError when the board lacks what a guard needs."""
    units = {s.name: s.unit for s in link.signals}
    limits = {}
    if guards.tilt_deg is not None:
        if "tilt" not in units:
            raise ValueError("guard tilt_deg: the board streams no 'tilt' signal")
        limits["tilt"] = float(from_si(to_si(guards.tilt_deg, "deg"), units["tilt"]))
    if guards.wheel_fraction is not None:
        trip = link.params.get("trip_wheel")
        if "wheel" not in units or trip is None:
            raise ValueError("guard wheel_fraction: the board declares no 'wheel' signal "
                             "with a trip_wheel parameter")
        limits["wheel"] = guards.wheel_fraction * float(trip.value)
    return ExperimentGuards(limits=limits, stale_s=guards.stale_s or DEFAULT_STALE_S)


def cancelled(cancel) -> bool:
    if cancel is None:
        return False
    is_set = getattr(cancel, "is_set", None)
    return bool(is_set() if callable(is_set) else cancel())


class StepStop:
    """The cancel flag handed to experiments: the user's cancel, or the step's time limit."""

    def __init__(self, cancel, link, timeout_s: float | None) -> None:
        self.cancel, self.link = cancel, link
        self.deadline = None if timeout_s is None else link.now() + timeout_s
        self.why: str | None = None

    def is_set(self) -> bool:
        if cancelled(self.cancel):
            self.why = "cancelled"
        elif self.deadline is not None and self.link.now() > self.deadline:
            self.why = "timeout"
        return self.why is not None




class RunState(Protocol):
    """What the steps use of the run that drives them (rigbench.sequences.run)."""

    link: Any                   # the open Link
    seq: "Sequence"
    folder: Path                # the results folder: every file a step writes goes here
    result: "SequenceResult"    # steps count falls (``result.fell``); checks read it
    latest: dict                # "relay"/"sweep" -> metrics of the latest such step, or None
    sweep_pre_s: float          # quiet hold before a sweep's first push, link-clock s
    band_noise: float           # settling band of a push, in noise standard deviations

    def report(self, i: int, step, state: str, text: str, experiment=None) -> None:
        """Progress of step ``i`` (``experiment``: an experiment's progress, if any)."""


class StepRunner:
    """Runs the steps of ``run`` (a :class:`RunState`), one method per step kind."""

    def __init__(self, run: RunState) -> None:
        self.run = run

    @property
    def link(self):
        return self.run.link

    def run_step(self, i: int, step, out, stop: "StepStop") -> None:
        """Run step ``i`` (its outcome ``out`` is filled in); raises StepAbort to end the run."""
        action = STEP_ACTIONS.get(step.kind)
        if action is None:
            raise StepAbort("error", f"no action for a {step.kind!r} step")
        action(self, i, step, out, stop)

    def _experiment_progress(self, i: int, step):
        def cb(p) -> None:
            words = f"{step.label()}: {p.phase}" + (f", {p.message}" if p.message else "")
            self.run.report(i, step, "running", words, experiment=p)
        return cb

    def _guards(self, step) -> ExperimentGuards:
        return experiment_guards(self.link, step.guards)

    def _ended(self, res, stop: StepStop, step) -> None:
        """Turn an experiment's stop into the run's stop."""
        if res.stopped_by == "done":
            return
        if res.stopped_by == "guard" and res.detail.startswith("|tilt|"):
            self.run.result.fell += 1
        if res.stopped_by == "cancelled":
            why = stop.why or "cancelled"
            raise StepAbort(why, f"over its timeout_s {step.timeout_s:g}" if why == "timeout"
                         else "cancelled by the user")
        why = res.stopped_by
        raise StepAbort(why if why in ("lost", "error", "disk") else "guard" if kills_motor(why)
                        else "error", res.detail)

    # ------------------------------------------------------------------ the steps

    def _do_push(self, i, step, out, stop) -> None:
        report = push_profile(self.link, step.profile, persist=step.persist)
        changed = sum(1 for row in report.rows if row.change != "same")
        out.data = {"changed": changed, "sent": len(report.applied),
                    "saved": None if report.save is None else report.save.verified}
        out.detail = f"{changed} of {len(report.rows)} values changed, read back " + (
            "matches" if not report.mismatches else "DIFFERS")
        if not report.ok:
            why = (f"read back differs for {', '.join(report.mismatches)}" if report.mismatches
                   else report.reset or "the save could not be verified")
            raise StepAbort("failed", why)

    def _do_arm(self, i, step, out, stop) -> None:
        motor = motor_state(self.link)
        if motor in ("armed", "running"):
            out.detail = f"already {motor}"
            return
        try:
            self.link.arm()
        except BoardRefused as exc:
            if exc.code == "interlock":
                hint = ("; check the rig, then clear the fault (a `clear` step before "
                        "`arm`, or `rigbench clear`)" if "fault" in exc.text.split(",") else "")
                raise StepAbort("refused", f"the board refused to arm: {exc.text}{hint}") \
                    from None
            raise

    def _do_hold(self, i, step, out, stop) -> None:
        self.link.mode("hold")

    def _do_disarm(self, i, step, out, stop) -> None:
        out.detail = f"motor {self.link.disarm()}"

    def _do_clear(self, i, step, out, stop) -> None:
        # a latched fault is cleared only because the file says so; the motor ends off
        # (PROTOCOL.md §7.3) and a later `arm` step is needed before anything moves
        before = motor_state(self.link)
        after = self.link.clear()
        out.detail = f"motor {after}" + (" (fault cleared)" if before == "tripped"
                                         else " (no fault was latched)")

    def _do_set(self, i, step, out, stop) -> None:
        limits = [n for n in step.values if n.startswith(("trip_", "arm_"))]
        if limits and not step.loosen_limits:
            motor = self.link.status().motor
            if motor in ("armed", "running"):
                now = self.link.get(*limits)
                looser = [f"{n} {now[n]:g} -> {step.values[n]:g}" for n in limits
                          if isinstance(now.get(n), float) and abs(step.values[n]) > abs(now[n])]
                if looser:
                    raise StepAbort("refused", f"set would loosen {', '.join(looser)} while the "
                                               f"motor is {motor}; disarm first, or add "
                                               "loosen_limits: true to the step")
        applied = self.link.set(**step.values)
        out.data = {"applied": dict(applied)}
        out.detail = " ".join(f"{k}={format_value(v)}" for k, v in applied.items()
                              if isinstance(v, float))

    def _experiment(self, i, step, stop, *, name: str, results=False) -> Experiment:
        return Experiment(self.link, name=name, guards=self._guards(step), cancel=stop,
                          progress=self._experiment_progress(i, step),
                          results_dir=self.run.folder if results else None)

    def _do_wait(self, i, step, out, stop) -> None:
        exp = self._experiment(i, step, stop, name=f"wait {step.index}")
        settled = None
        with exp:
            if step.seconds is not None:
                exp.wait(step.seconds, on_block=_ticker(exp, "waiting", step.seconds))
            else:
                tracker = settled_tracker(exp.signals, step.settled)
                tick = _ticker(exp, "waiting to settle", step.timeout_s)

                def feed(t, v):
                    tracker.feed(t, v)
                    tick(t, v)
                settled = exp.wait(step.timeout_s, until=tracker.done, on_block=feed)
        self._ended(exp.result, stop, step)
        if step.settled is not None and not settled:
            raise StepAbort("timeout", f"|{step.settled.signal}| did not stay below "
                                       f"{step.settled.below:g} for {step.settled.for_s:g} s "
                                       f"within {step.timeout_s:g} s")
        out.detail = f"{exp.result.ended_s - exp.result.started_s:.3g} s"

    def _do_record(self, i, step, out, stop) -> None:
        folder = self.run.folder
        path = folder / f"{step.name}.csv"
        if path.resolve().parent != folder.resolve():
            raise StepAbort("error", f"recording {step.name!r} would leave the results folder")
        exp = self._experiment(i, step, stop, name=f"record {step.name}")
        rec = None
        with exp:
            rec = Recorder(path, self.link, background=False,
                           notes=[f"sequence {self.run.seq.name!r}, {step.label()}"]).start()
            out.recordings.append(path.name)
            tick = _ticker(exp, f"recording {path.name}", step.seconds)

            def feed(t, v):
                rec.poll()
                if rec.failed:
                    exp.halt("disk", rec.failed)
                tick(t, v)
            try:
                exp.wait(step.seconds, on_block=feed)
            finally:
                rec.close()
        out.detail = f"{rec.rows} rows to {path.name}"
        self._ended(exp.result, stop, step)
        if rec.failed:  # the last write, at close, failed: the step's data is not all there
            raise StepAbort("disk", rec.failed)

    def _do_relay(self, i, step, out, stop) -> None:
        from rigbench.experiments.relay import run_relay

        ls = loop_signals(self.link, step.loop)
        if ls.trip is None:
            raise StepAbort("refused", f"loop {step.loop!r}: the board declares no "
                                    f"trip_{ls.measure}, so the relay's bound cannot be sent")
        run = run_relay(self.link, step.loop, amplitude=step.amplitude,
                        hysteresis=step.hysteresis, bias=step.bias, max_s=step.max_s,
                        cycles=step.cycles, cancel=stop,
                        progress=self._experiment_progress(i, step), results_dir=self.run.folder,
                        guards=self._guards(step), bound_fraction=step.bound / ls.trip)
        metrics, data = relay_outcome(run)
        out.metrics, out.data = metrics, data
        if run.analysis is not None and run.analysis.period_s is not None:
            unit = "" if ls.measure_unit == "1" else f" {ls.measure_unit}"
            out.detail = (f"period {run.analysis.period_s:.4g} s, oscillation "
                          f"{run.analysis.amplitude:.4g}{unit}, "
                          f"{run.analysis.cycles} cycles")
        res = run.experiment
        if res is not None and res.recording is not None:
            out.recordings.append(Path(res.recording).name)
        self.run.latest["relay"] = metrics
        if res is not None:
            self._ended(res, stop, step)
        if run.stopped_by != "converged":
            raise StepAbort("failed", run.reason or run.stopped_by)

    def _do_sweep(self, i, step, out, stop) -> None:
        pre_s = self.run.sweep_pre_s
        ls = loop_signals(self.link, step.loop)
        exp = self._experiment(i, step, stop, name=f"sweep {step.loop}", results=True)
        pushes: list = []
        dt = 1.0 / float(self.link.info.rate_hz)
        total = len(step.amplitudes) * step.repeats
        with exp:
            exp.hold()
            exp.wait(pre_s)
            for amp in step.amplitudes:
                for rep in range(step.repeats):
                    t0 = self.link.now()
                    exp.mode("inject", loop=ls.name, shape=step.shape, at=step.at, amp=amp,
                             time_s=step.time_s)
                    exp.wait(max(step.spacing_s, step.time_s + 3 * dt))
                    pushes.append(push_record(exp, ls, t0, amp, rep, pre_s=pre_s,
                                               band_noise=self.run.band_noise))
                    exp.report("sweep", fraction=len(pushes) / total, force=True,
                               cycles=len(pushes), cycles_needed=total,
                               message=f"push {len(pushes)} of {total}, amplitude {amp:g}")
        res = exp.result
        fell_now = res.stopped_by in ("guard", "trip") and (
            res.detail.startswith(f"|{ls.measure}|") or "limit" in res.detail)
        out.metrics = sweep_metrics(pushes, extra_fell=1 if fell_now else 0)
        m = out.metrics
        unit = "" if ls.measure_unit == "1" else f" {ls.measure_unit}"
        out.detail = (f"{len(pushes)} pushes, peak |error| up to {_g(m['sweep.peak_max'])}"
                      f"{unit}, mean IAE {_g(m['sweep.iae_mean'])}, fell "
                      f"{m['sweep.fell']}")
        out.data = {"loop": ls.name, "measure": ls.measure, "measure_unit": ls.measure_unit,
                    "amplitude_unit": {"body": "N.m", "setpoint": ls.measure_unit,
                                       "output": ls.output_unit}[step.at],
                    "shape": step.shape, "at": step.at, "pushes": pushes}
        if res.recording is not None:
            out.recordings.append(Path(res.recording).name)
        self.run.latest["sweep"] = out.metrics
        self._ended(res, stop, step)

    def _do_check(self, i, step, out, stop) -> None:
        family = step.metric.split(".")[0] if "." in step.metric else None
        if family is None:
            measured = float(getattr(self.run.result, step.metric))
            why = ""
        elif self.run.latest.get(family) is None:
            measured, why = None, f"no {family} step has run before this check"
        else:
            measured = self.run.latest[family].get(step.metric)
            why = "" if measured is not None else f"{step.metric} was not measured"
        passed = measured is not None and measured == measured and step.passes(measured)
        out.check = {"metric": step.metric, "op": step.op, "value": step.value,
                     "measured": measured, "passed": bool(passed)}
        out.outcome = "passed" if passed else "failed"
        shown = "-" if measured is None else f"{measured:.5g}"
        out.detail = why or f"{step.metric} = {shown} ({step.op} {step.value:g} " \
                            f"{'holds' if passed else 'does NOT hold'})"


# step kind -> the method that runs it (``repeat`` is unrolled before the run: expand)
STEP_ACTIONS: dict[str, Callable[..., None]] = {
    "push": StepRunner._do_push,
    "arm": StepRunner._do_arm,
    "hold": StepRunner._do_hold,
    "disarm": StepRunner._do_disarm,
    "clear": StepRunner._do_clear,
    "set": StepRunner._do_set,
    "wait": StepRunner._do_wait,
    "record": StepRunner._do_record,
    "relay": StepRunner._do_relay,
    "sweep": StepRunner._do_sweep,
    "check": StepRunner._do_check,
}


def _ticker(exp, phase: str, budget_s: float):
    """An ``on_block`` that reports the experiment's progress (throttled by the runner)."""
    def tick(t, v) -> None:
        exp.report(phase, budget_s=budget_s, fraction=min(1.0, exp.elapsed_s() / budget_s))
    return tick


def _g(value) -> str:
    return "-" if value is None else f"{value:.4g}"


def motor_state(link) -> str | None:
    try:
        return link.status().motor
    except (LinkError, BoardRefused):
        return link.motor_state
