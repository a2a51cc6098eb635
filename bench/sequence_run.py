"""Running a scripted test sequence on a link: step by step, guarded, ending with the motor off.

``run_sequence(link, sequence=seq)`` runs the steps of a loaded sequence (bench.sequence_file)
in order, repeats unrolled (``expand``), and returns a :class:`SequenceResult`
(bench.sequence_results). Each step runs as the README of ``sequences/`` says; ``wait``,
``record``, ``relay`` and ``sweep`` run inside a guarded experiment (bench.experiments): the
guards in force for the step (|tilt|, |wheel| as a fraction of ``trip_wheel``, stale
telemetry), a board trip, a board restart or a lost link kill the motor at once and stop
the run. Between steps, a trip or restart seen in the link's events stops the run too.

- A failed ``check`` is recorded and the run goes on, so the summary lists every check;
  the run then counts as failed (``rigbench run`` exits 6). Everything else that goes
  wrong stops the run: a guard, a step's ``timeout_s``, a refusal by the board, a relay
  test without a sustained cycle, the cancel flag.
- **The motor is off at the end, always** (``finally``): after a stop, ``on_abort`` says
  how (``kill``: the kill byte, fault latched; ``disarm``: the ``disarm`` command, and the
  kill if that fails); after a complete run a motor still armed is disarmed. The state is
  read back and, if still not off or tripped, the kill is sent.
- ``progress(SequenceProgress)`` is called in the caller's thread at the start and end of
  every step and while experiments run. ``cancel`` is a ``threading.Event``-like object
  (``is_set()``) or a function returning True to stop.
- Files: only inside the results folder (recordings of ``record`` steps as ``NAME.csv``
  with a YAML sidecar, the experiments' recordings, ``summary.yaml`` and ``summary.md``,
  rewritten atomically after every step). Profiles were read when the sequence was loaded.

Units: times in link-clock seconds; values in the board's declared units.

Must not import textual, bench.ui, bench.commands or control.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from bench.experiments.conventions import loop_signals
from bench.experiments.runner import ArmRefused, Experiment
from bench.experiments.runner import Guards as ExperimentGuards
from bench.link import BoardRefused, LinkError, LinkLost
from bench.profile_push import PushRefused, push_profile
from bench.recording import Recorder, RecordingError
from bench.sequence_file import DEFAULT_STALE_S, Sequence, expand
from bench.sequence_results import SequenceResult, StepOutcome, summary_dict, write_summary
from bench.sequence_stepdata import (
    push_record, relay_outcome, settled_tracker, step_settings, sweep_metrics,
)
from bench.units import from_si, to_si
from bench.wire.describe import format_value
from bench.yamlload import SchemaError

__all__ = ["run_sequence", "SequenceProgress", "default_results_dir", "check_runnable",
           "prepare_results_dir", "experiment_guards", "RESERVED_NAMES"]

RESERVED_NAMES = ("summary",)      # summary.yaml is the run's own file
_KILLING = {"guard": "guard", "trip": "guard", "stale": "guard", "reset": "guard",
            "lost": "lost", "error": "error"}


@dataclass(frozen=True)
class SequenceProgress:
    """Where a run is: ``done`` steps of ``total`` finished; ``state`` of the step
    ``index``: start, running, ok, passed, failed, or end (the run is over)."""

    done: int
    total: int
    index: str
    kind: str
    state: str
    text: str
    elapsed_s: float
    experiment: object = None       # the experiment's own Progress while one runs


class _Abort(Exception):
    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(f"{reason}: {detail}")
        self.reason, self.detail = reason, detail


def default_results_dir(sequence: Sequence, *, now: datetime | None = None) -> Path:
    """``results/<name>-<YYYYmmdd-HHMMSS>`` in the sequence's project folder."""
    slug = re.sub(r"[^a-z0-9]+", "-", sequence.name.lower()).strip("-") or "sequence"
    return sequence.project / "results" / f"{slug}-{(now or datetime.now()):%Y%m%d-%H%M%S}"


def check_runnable(sequence: Sequence) -> list:
    """The expanded steps, after the checks the loader leaves to the runner (names the
    run's own files use). Raises SchemaError naming file, line and step."""
    steps = expand(sequence)
    for s in steps:
        if s.kind == "record" and s.name.lower() in RESERVED_NAMES:
            raise SchemaError(str(sequence.path), s.line, f"{s.where}.name",
                              f"{s.name!r} is the name of the run's own summary; pick another")
    return steps


def prepare_results_dir(folder: str | Path) -> Path:
    """Create the results folder; refuse a file, or a folder that already holds files."""
    folder = Path(folder)
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
        raise FileExistsError(17, "exists and is not an empty folder", str(folder))
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def experiment_guards(link, guards) -> ExperimentGuards:
    """A sequence's guards (bench.sequence_steps.Guards) as an experiment's, in the board's
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


def _cancelled(cancel) -> bool:
    if cancel is None:
        return False
    is_set = getattr(cancel, "is_set", None)
    return bool(is_set() if callable(is_set) else cancel())


class _StepStop:
    """The cancel flag handed to experiments: the user's cancel, or the step's time limit."""

    def __init__(self, cancel, link, timeout_s: float | None) -> None:
        self.cancel, self.link = cancel, link
        self.deadline = None if timeout_s is None else link.now() + timeout_s
        self.why: str | None = None

    def is_set(self) -> bool:
        if _cancelled(self.cancel):
            self.why = "cancelled"
        elif self.deadline is not None and self.link.now() > self.deadline:
            self.why = "timeout"
        return self.why is not None


def run_sequence(link, *, sequence: Sequence, results_dir: str | Path | None = None,
                 cancel=None, progress=None, sweep_pre_s: float = 0.5,
                 band_noise: float = 3.0) -> SequenceResult:
    """Run ``sequence`` on ``link`` (see the module docstring); write the results folder
    (default :func:`default_results_dir`) and return the result."""
    steps = check_runnable(sequence)
    folder = prepare_results_dir(results_dir or default_results_dir(sequence))
    return _Run(link, sequence, steps, folder, cancel, progress, sweep_pre_s,
                band_noise).run()


class _Run:
    def __init__(self, link, seq: Sequence, steps, folder: Path, cancel, progress,
                 sweep_pre_s: float, band_noise: float) -> None:
        self.link, self.seq, self.steps, self.folder = link, seq, steps, folder
        self.cancel, self.progress_cb = cancel, progress
        self.sweep_pre_s, self.band_noise = sweep_pre_s, band_noise
        self.latest: dict = {"relay": None, "sweep": None}
        self.done = 0
        info = link.info
        board = {"board": info.board, "firmware": info.firmware, "rig": info.rig,
                 "protocol": "%d.%d" % info.version, "rate_hz": info.rate_hz,
                 "simulated": info.simulated}
        self.result = SequenceResult(
            seq.name, str(seq.path), folder, link.url, board, _wall(),
            [StepOutcome(s.index, s.kind, s.line, s.label(), step_settings(s, seq.project),
                         dict(s.bindings)) for s in steps], seq.on_abort)
        self.t0 = link.now()

    # ------------------------------------------------------------------ the run

    def run(self) -> SequenceResult:
        stop = None
        self._write()
        try:
            self.ev_cursor = self.link.event_cursor()
            self._preflight()
            for i, step in enumerate(self.steps):
                self._step(i, step)
        except _Abort as exc:
            stop = exc
        except KeyboardInterrupt:
            stop = _Abort("cancelled", "interrupted (Ctrl-C)")
        finally:
            self._finish(stop)
        return self.result

    def _preflight(self) -> None:
        seq, info = self.seq, self.link.info
        if seq.rig and info.rig != seq.rig:
            raise _Abort("refused", f"the sequence is written for a {seq.rig!r} rig; the "
                                    f"board at {self.link.url} is a {info.rig!r} rig")
        for s in self.steps:
            try:
                experiment_guards(self.link, s.guards)
            except ValueError as exc:
                raise _Abort("refused", f"{s.label()} (line {s.line}): {exc}") from None

    def _step(self, i: int, step) -> None:
        link, out = self.link, self.result.steps[i]
        stop = _StepStop(self.cancel, link, step.timeout_s)
        if stop.is_set():
            raise _Abort("cancelled", f"cancelled before {step.label()}")
        out.started_s = link.now()
        self.current = i
        self._report(i, step, "start", f"{step.label()} (line {step.line})")
        try:
            try:
                getattr(self, f"_do_{step.kind}")(step, out, stop)
            except (ArmRefused, PushRefused) as exc:
                raise _Abort("refused", " ".join(str(exc).split())) from None
            except BoardRefused as exc:
                raise _Abort("refused", f"the board refused: {exc}") from None
            except LinkLost as exc:
                raise _Abort("lost", str(exc)) from None
            except LinkError as exc:
                raise _Abort("lost", str(exc)) from None
            except (RecordingError, OSError) as exc:
                raise _Abort("error", str(exc)) from None
            except ValueError as exc:
                raise _Abort("failed", str(exc)) from None
            out.ended_s = link.now()
            if step.timeout_s is not None and out.ended_s - out.started_s > step.timeout_s:
                raise _Abort("timeout", f"took {out.ended_s - out.started_s:.3g} s, longer "
                                        f"than its timeout_s {step.timeout_s:g}")
            self._watch_events()
            if out.outcome == "not run":
                out.outcome = "ok"
        except _Abort as exc:
            out.outcome = "failed"
            out.detail = out.detail or exc.detail
            self.result.stopping_step = step.index
            raise
        finally:
            if out.ended_s is None:
                out.ended_s = _now_or_none(link)
            self.done = i + 1
            self._write()
            self._report(i, step, out.outcome, f"{step.label()}: {out.outcome}"
                         + (f": {out.detail}" if out.detail else ""))

    def _watch_events(self) -> None:
        """Trips and restarts the link saw (between steps too) stop the run."""
        self.ev_cursor, events = self.link.events_since(self.ev_cursor)
        for ev in events:
            if ev.source == "board" and ev.kind == "trip":
                self.result.trips += 1
                if ev.get("cause") == "tilt_limit":
                    self.result.fell += 1
                raise _Abort("guard", f"the board tripped: {ev.get('cause', '?')}")
            if ev.source == "link" and ev.kind in ("reset", "lost"):
                raise _Abort("guard" if ev.kind == "reset" else "lost",
                             f"link {ev.kind}: the board restarted or went away")

    def _finish(self, stop: _Abort | None) -> None:
        r, link = self.result, self.link
        if stop is not None:
            r.stopped_by, r.detail = stop.reason, stop.detail
            self._count_trips_after_stop()
        motor = _motor(link)
        try:
            if motor in ("armed", "running"):
                if stop is None:
                    link.disarm()
                elif self.seq.on_abort == "disarm":
                    r.abort_action = "disarm"
                    link.disarm()
                else:
                    r.abort_action = "kill"
                    link.kill()
            motor = _motor(link)
            if motor not in ("off", "tripped"):
                r.abort_action = "kill"
                link.kill()
                motor = _motor(link)
        except (LinkError, BoardRefused):
            try:
                r.abort_action = "kill"
                link.kill()
            except LinkError:
                pass  # the link is gone: the board's watchdog turns the motor off
            motor = _motor(link)
        r.motor_after = motor or "unknown (no reply; the board's watchdog stops the motor)"
        r.finished = _wall()
        try:
            h = link.health()
            r.link_health = {"state": h.state, "lost_frames": h.lost_frames,
                             "crc_errors": h.crc_errors, "resets": h.resets,
                             "timeouts": h.timeouts}
        except LinkError:
            pass
        self._write()
        self._report(max(self.done - 1, 0), None, "end", _end_text(r))

    def _count_trips_after_stop(self) -> None:
        try:
            self.ev_cursor, events = self.link.events_since(self.ev_cursor)
        except (LinkError, ValueError):
            return
        for ev in events:
            if ev.source == "board" and ev.kind == "trip":
                self.result.trips += 1
                if ev.get("cause") == "tilt_limit":
                    self.result.fell += 1

    def _write(self) -> None:
        write_summary(self.folder, summary_dict(self.result))

    def _report(self, i: int, step, state: str, text: str, experiment=None) -> None:
        if self.progress_cb is None:
            return
        index = step.index if step is not None else ""
        kind = step.kind if step is not None else ""
        self.progress_cb(SequenceProgress(self.done, len(self.steps), index, kind, state,
                                          text, self.link.now() - self.t0, experiment))

    def _experiment_progress(self, i: int, step):
        def cb(p) -> None:
            words = f"{step.label()}: {p.phase}" + (f", {p.message}" if p.message else "")
            self._report(i, step, "running", words, experiment=p)
        return cb

    def _guards(self, step) -> ExperimentGuards:
        return experiment_guards(self.link, step.guards)

    def _ended(self, res, stop: _StepStop, step) -> None:
        """Turn an experiment's stop into the run's stop."""
        if res.stopped_by == "done":
            return
        if res.stopped_by == "guard" and res.detail.startswith("|tilt|"):
            self.result.fell += 1
        if res.stopped_by == "cancelled":
            why = stop.why or "cancelled"
            raise _Abort(why, f"over its timeout_s {step.timeout_s:g}" if why == "timeout"
                         else "cancelled by the user")
        raise _Abort(_KILLING.get(res.stopped_by, "error"), res.detail)

    # ------------------------------------------------------------------ the steps

    def _do_push(self, step, out, stop) -> None:
        report = push_profile(self.link, step.profile, persist=step.persist)
        changed = sum(1 for row in report.rows if row.change != "same")
        out.data = {"changed": changed, "sent": len(report.applied),
                    "saved": None if report.save is None else report.save.verified}
        out.detail = f"{changed} of {len(report.rows)} values changed, read back " + (
            "matches" if not report.mismatches else "DIFFERS")
        if not report.ok:
            why = (f"read back differs for {', '.join(report.mismatches)}" if report.mismatches
                   else report.reset or "the save could not be verified")
            raise _Abort("failed", why)

    def _do_arm(self, step, out, stop) -> None:
        motor = _motor(self.link)
        if motor in ("armed", "running"):
            out.detail = f"already {motor}"
            return
        try:
            self.link.arm()
        except BoardRefused as exc:
            if exc.code == "interlock":
                raise _Abort("refused", f"the board refused to arm: {exc.text}") from None
            raise

    def _do_hold(self, step, out, stop) -> None:
        self.link.mode("hold")

    def _do_disarm(self, step, out, stop) -> None:
        out.detail = f"motor {self.link.disarm()}"

    def _do_set(self, step, out, stop) -> None:
        applied = self.link.set(**step.values)
        out.data = {"applied": dict(applied)}
        out.detail = " ".join(f"{k}={format_value(v)}" for k, v in applied.items()
                              if isinstance(v, float))

    def _experiment(self, i, step, stop, *, name: str, results=False) -> Experiment:
        return Experiment(self.link, name=name, guards=self._guards(step), cancel=stop,
                          progress=self._experiment_progress(i, step),
                          results_dir=self.folder if results else None)

    def _do_wait(self, step, out, stop) -> None:
        i = self.current
        exp = self._experiment(i, step, stop, name=f"wait {step.index}")
        settled = None
        with exp:
            if step.seconds is not None:
                exp.wait(step.seconds)
            else:
                tracker = settled_tracker(exp.signals, step.settled)
                settled = exp.wait(step.timeout_s, until=tracker.done, on_block=tracker.feed)
        self._ended(exp.result, stop, step)
        if step.settled is not None and not settled:
            raise _Abort("timeout", f"|{step.settled.signal}| did not stay below "
                                    f"{step.settled.below:g} for {step.settled.for_s:g} s within "
                                    f"{step.timeout_s:g} s")
        out.detail = f"{exp.result.ended_s - exp.result.started_s:.3g} s"

    def _do_record(self, step, out, stop) -> None:
        i = self.current
        path = self.folder / f"{step.name}.csv"
        if path.resolve().parent != self.folder.resolve():
            raise _Abort("error", f"recording {step.name!r} would leave the results folder")
        exp = self._experiment(i, step, stop, name=f"record {step.name}")
        rec = None
        with exp:
            rec = Recorder(path, self.link, background=False,
                           notes=[f"sequence {self.seq.name!r}, {step.label()}"]).start()
            out.recordings.append(path.name)
            try:
                exp.wait(step.seconds, on_block=lambda t, v: rec.poll())
            finally:
                rec.close()
        out.detail = f"{rec.rows} rows to {path.name}"
        self._ended(exp.result, stop, step)

    def _do_relay(self, step, out, stop) -> None:
        from bench.experiments.relay import run_relay

        i = self.current
        ls = loop_signals(self.link, step.loop)
        if ls.trip is None:
            raise _Abort("refused", f"loop {step.loop!r}: the board declares no "
                                    f"trip_{ls.measure}, so the relay's bound cannot be sent")
        run = run_relay(self.link, step.loop, amplitude=step.amplitude,
                        hysteresis=step.hysteresis, bias=step.bias, max_s=step.max_s,
                        cycles=step.cycles, cancel=stop,
                        progress=self._experiment_progress(i, step), results_dir=self.folder,
                        guards=self._guards(step), bound_fraction=step.bound / ls.trip)
        metrics, data = relay_outcome(run)
        out.metrics, out.data = metrics, data
        if run.analysis is not None and run.analysis.period_s is not None:
            out.detail = (f"period {run.analysis.period_s:.4g} s, oscillation "
                          f"{run.analysis.amplitude:.4g} {ls.measure_unit}, "
                          f"{run.analysis.cycles} cycles")
        res = run.experiment
        if res is not None and res.recording is not None:
            out.recordings.append(Path(res.recording).name)
        self.latest["relay"] = metrics
        if res is not None:
            self._ended(res, stop, step)
        if run.stopped_by != "converged":
            raise _Abort("failed", run.reason or run.stopped_by)

    def _do_sweep(self, step, out, stop) -> None:
        i = self.current
        ls = loop_signals(self.link, step.loop)
        exp = self._experiment(i, step, stop, name=f"sweep {step.loop}", results=True)
        pushes: list = []
        dt = 1.0 / float(self.link.info.rate_hz)
        total = len(step.amplitudes) * step.repeats
        with exp:
            exp.hold()
            exp.wait(self.sweep_pre_s)
            for amp in step.amplitudes:
                for rep in range(step.repeats):
                    t0 = self.link.now()
                    exp.mode("inject", loop=ls.name, shape=step.shape, at=step.at, amp=amp,
                             time_s=step.time_s)
                    exp.wait(max(step.spacing_s, step.time_s + 3 * dt))
                    pushes.append(push_record(exp, ls, t0, amp, rep, pre_s=self.sweep_pre_s,
                                               band_noise=self.band_noise))
                    exp.report("sweep", fraction=len(pushes) / total, force=True,
                               cycles=len(pushes), cycles_needed=total,
                               message=f"push {len(pushes)} of {total}, amplitude {amp:g}")
        res = exp.result
        fell_now = res.stopped_by in ("guard", "trip") and (
            res.detail.startswith(f"|{ls.measure}|") or "limit" in res.detail)
        out.metrics = sweep_metrics(pushes, extra_fell=1 if fell_now else 0)
        m = out.metrics
        out.detail = (f"{len(pushes)} pushes, peak |error| up to {_g(m['sweep.peak_max'])} "
                      f"{ls.measure_unit}, mean IAE {_g(m['sweep.iae_mean'])}, fell "
                      f"{m['sweep.fell']}")
        out.data = {"loop": ls.name, "measure": ls.measure, "measure_unit": ls.measure_unit,
                    "amplitude_unit": {"body": "N.m", "setpoint": ls.measure_unit,
                                       "output": ls.output_unit}[step.at],
                    "shape": step.shape, "at": step.at, "pushes": pushes}
        if res.recording is not None:
            out.recordings.append(Path(res.recording).name)
        self.latest["sweep"] = out.metrics
        self._ended(res, stop, step)

    def _do_check(self, step, out, stop) -> None:
        family = step.metric.split(".")[0] if "." in step.metric else None
        if family is None:
            measured = float(getattr(self.result, step.metric))
            why = ""
        elif self.latest.get(family) is None:
            measured, why = None, f"no {family} step has run before this check"
        else:
            measured = self.latest[family].get(step.metric)
            why = "" if measured is not None else f"{step.metric} was not measured"
        passed = measured is not None and measured == measured and step.passes(measured)
        out.check = {"metric": step.metric, "op": step.op, "value": step.value,
                     "measured": measured, "passed": bool(passed)}
        out.outcome = "passed" if passed else "failed"
        shown = "-" if measured is None else f"{measured:.5g}"
        out.detail = why or f"{step.metric} = {shown} ({step.op} {step.value:g} " \
                            f"{'holds' if passed else 'does NOT hold'})"


def _g(value) -> str:
    return "-" if value is None else f"{value:.4g}"


def _motor(link) -> str | None:
    try:
        return link.status().motor
    except (LinkError, BoardRefused):
        return link.motor_state


def _now_or_none(link):
    try:
        return link.now()
    except Exception:  # noqa: BLE001 - a clock of a closed port: no time to give
        return None


def _wall() -> str:
    return datetime.now().astimezone().isoformat(timespec="seconds")


def _end_text(r: SequenceResult) -> str:
    if r.stopped_by == "done":
        verdict = (f"{r.checks_failed} of {len(r.checks)} checks FAILED" if r.checks_failed
                   else f"all {len(r.checks)} checks passed")
        return f"finished: {verdict}; motor {r.motor_after}"
    return (f"stopped ({r.stopped_by}) at step {r.stopping_step or '-'}: {r.detail}; "
            f"motor {r.motor_after}")

