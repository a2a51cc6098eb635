"""Running a scripted test sequence on a link: step by step, guarded, ending with the motor off.

``run_sequence(link, sequence=seq)`` runs the steps of a loaded sequence (rigbench.sequences.file)
in order, repeats unrolled (``expand``), and returns a :class:`SequenceResult`
(rigbench.sequences.results). Each step runs as the README of ``sequences/`` says; ``wait``,
``record``, ``relay`` and ``sweep`` run inside a guarded experiment (rigbench.experiments): the
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
"""

from __future__ import annotations

import math
import re
import time
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from rigbench.experiments.runner import ArmRefused
from rigbench.link.killing import CUT_POWER
from rigbench.link import BoardRefused, LinkError, LinkLost
from rigbench.profiles.push import PushRefused
from rigbench.recordings.recording import RecordingError
from rigbench.sequences.check import check_sequence_against_board
from rigbench.sequences.execute import (
    StepAbort, StepRunner, StepStop, experiment_guards, motor_state,
)
from rigbench.sequences.file import Sequence, expand
from rigbench.sequences.results import SequenceResult, StepOutcome, summary_dict, write_summary
from rigbench.sequences.stepdata import step_settings
from rigbench.base.yamlload import SchemaError

__all__ = ["run_sequence", "SequenceProgress", "default_results_dir", "check_runnable",
           "prepare_results_dir", "experiment_guards", "RESERVED_NAMES"]

RESERVED_NAMES = ("summary",)      # summary.yaml is the run's own file


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


def prepare_results_dir(folder: str | Path, *, inside: str | Path | None = None) -> Path:
    """Create the results folder; refuse a file, or a folder that already holds files.
    ``inside``: a folder the results must stay in once links are resolved (the project
    folder, for the default results folder): a ``results`` link out of it is refused
    before anything is created."""
    folder = Path(folder)
    if inside is not None:
        real, home = folder.resolve(), Path(inside).resolve()
        if real != home and home not in real.parents:
            raise PermissionError(13, f"resolves (through a link) to {real}, outside the "
                                      f"project folder {home}; give --out to choose", str(folder))
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
        raise FileExistsError(17, "exists and is not an empty folder", str(folder))
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def run_sequence(link, *, sequence: Sequence, results_dir: str | Path | None = None,
                 cancel=None, progress=None, sweep_pre_s: float = 0.5,
                 band_noise: float = 3.0) -> SequenceResult:
    """Run ``sequence`` on ``link`` (see the module docstring); write the results folder
    (default :func:`default_results_dir`) and return the result."""
    steps = check_runnable(sequence)
    folder = (prepare_results_dir(results_dir) if results_dir else
              prepare_results_dir(default_results_dir(sequence), inside=sequence.project))
    return _Run(link, sequence, steps, folder, cancel, progress, sweep_pre_s,
                band_noise).run()


class _Run:
    """One run of a sequence; it is the RunState its StepRunner works on."""

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
        self._written = -math.inf
        self.runner = StepRunner(self)

    # ------------------------------------------------------------------ the run

    def run(self) -> SequenceResult:
        stop = None
        self._write()
        try:
            self.ev_cursor = self.link.event_cursor()
            self._preflight()
            for i, step in enumerate(self.steps):
                self._step(i, step)
        except StepAbort as exc:
            stop = exc
        except KeyboardInterrupt:
            stop = StepAbort("cancelled", "interrupted (Ctrl-C)")
        finally:
            self._finish(stop)
        return self.result

    def _preflight(self) -> None:
        """Nothing is sent when the sequence does not fit the board (rigbench.sequences.check)."""
        seq, link = self.seq, self.link
        problems = check_sequence_against_board(seq, link.params, link.loops, link.signals,
                                                info=link.info)
        errors = [p for p in problems if p.severity == "error"]
        if errors:
            more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
            raise StepAbort("refused", f"does not fit the board at {link.url}: "
                                       f"{errors[0].format(str(seq.path))}{more}")
        for s in self.steps:
            try:
                experiment_guards(link, s.guards)
            except ValueError as exc:
                raise StepAbort("refused", f"{s.label()} (line {s.line}): {exc}") from None

    def _step(self, i: int, step) -> None:
        link, out = self.link, self.result.steps[i]
        stop = StepStop(self.cancel, link, step.timeout_s)
        if stop.is_set():
            raise StepAbort("cancelled", f"cancelled before {step.label()}")
        out.started_s = link.now()
        self.report(i, step, "start", f"{step.label()} (line {step.line})")
        try:
            try:
                self.runner.run_step(i, step, out, stop)
            except (ArmRefused, PushRefused) as exc:
                raise StepAbort("refused", " ".join(str(exc).split())) from None
            except BoardRefused as exc:
                raise StepAbort("refused", f"the board refused: {exc}") from None
            except LinkLost as exc:
                raise StepAbort("lost", str(exc)) from None
            except LinkError as exc:
                raise StepAbort("lost", str(exc)) from None
            except (RecordingError, OSError) as exc:
                raise StepAbort("error", str(exc)) from None
            except ValueError as exc:
                raise StepAbort("failed", str(exc)) from None
            out.ended_s = link.now()
            if step.timeout_s is not None and out.ended_s - out.started_s > step.timeout_s:
                raise StepAbort("timeout", f"took {out.ended_s - out.started_s:.3g} s, longer "
                                        f"than its timeout_s {step.timeout_s:g}")
            self._watch_events()
            if out.outcome == "not run":
                out.outcome = "ok"
        except StepAbort as exc:
            out.outcome = "failed"
            out.detail = f"{exc.detail} ({out.detail})" if out.detail else exc.detail
            self.result.stopping_step = step.index
            raise
        finally:
            if out.ended_s is None:
                out.ended_s = _now_or_none(link)
            self.done = i + 1
            self._write(force=out.outcome == "failed")
            self.report(i, step, out.outcome, f"{step.label()}: {out.outcome}"
                         + (f": {out.detail}" if out.detail else ""))

    def _watch_events(self) -> None:
        """Trips and restarts the link saw (between steps too) stop the run."""
        self.ev_cursor, events = self.link.events_since(self.ev_cursor)
        for ev in events:
            if self._count_trip(ev):
                raise StepAbort("guard", f"the board tripped: {ev.get('cause', '?')}")
            if ev.source == "link" and ev.kind in ("reset", "lost"):
                raise StepAbort("guard" if ev.kind == "reset" else "lost",
                             f"link {ev.kind}: the board restarted or went away")

    def _kill(self, r) -> None:
        """The kill, confirmed by the board or escalated (rigbench.link.killing)."""
        outcome = self.link.kill_confirmed(reason="sequence")
        if outcome.escalated:
            r.detail = f"{r.detail}; {CUT_POWER}" if r.detail else CUT_POWER

    def _finish(self, stop: StepAbort | None) -> None:
        r, link = self.result, self.link
        if stop is not None:
            r.stopped_by, r.detail = stop.reason, stop.detail
            self._count_trips_after_stop()
        motor = motor_state(link)
        try:
            if motor in ("armed", "running"):
                if stop is None:
                    link.disarm()
                elif self.seq.on_abort == "disarm":
                    r.abort_action = "disarm"
                    link.disarm()
                else:
                    r.abort_action = "kill"
                    self._kill(r)
            motor = motor_state(link)
            if motor not in ("off", "tripped"):
                r.abort_action = "kill"
                self._kill(r)
                motor = motor_state(link)
        except (LinkError, BoardRefused):
            try:
                r.abort_action = "kill"
                self._kill(r)
            except LinkError:
                pass  # the link is gone: the board's watchdog turns the motor off
            motor = motor_state(link)
        if link.state == "lost" or motor is None:
            motor = "unknown (link lost; the board's watchdog turns the motor off)"
        r.motor_after = motor
        r.finished = _wall()
        try:
            h = link.health()
            r.link_health = {"state": h.state, "lost_frames": h.lost_frames,
                             "crc_errors": h.crc_errors, "resets": h.resets,
                             "timeouts": h.timeouts}
        except LinkError:
            pass
        self._write(force=True)
        self.report(max(self.done - 1, 0), None, "end", _end_text(r))

    def _count_trips_after_stop(self) -> None:
        try:
            self.ev_cursor, events = self.link.events_since(self.ev_cursor)
        except (LinkError, ValueError):
            return
        for ev in events:
            self._count_trip(ev)

    def _count_trip(self, ev) -> bool:
        """Count a board trip event (a tilt-limit trip is also a fall); True if it was one."""
        if ev.source == "board" and ev.kind == "trip":
            self.result.trips += 1
            if ev.get("cause") == "tilt_limit":
                self.result.fell += 1
            return True
        return False

    def _write(self, *, force: bool = False, every_s: float = 1.0) -> None:
        """Rewrite the summary files (at most every ``every_s`` of wall time unless forced:
        a long sequence would otherwise spend its time rewriting them)."""
        if force or time.monotonic() - self._written >= every_s:
            write_summary(self.folder, summary_dict(self.result))
            self._written = time.monotonic()

    def report(self, i: int, step, state: str, text: str, experiment=None) -> None:
        if self.progress_cb is None:
            return
        index = step.index if step is not None else ""
        kind = step.kind if step is not None else ""
        self.progress_cb(SequenceProgress(self.done, len(self.steps), index, kind, state,
                                          text, self.link.now() - self.t0, experiment))

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

