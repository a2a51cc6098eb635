"""The experiment runner: arm through the interlock, run board modes, record, guard, and
always leave the rig safe.

Use :class:`Experiment` as a context manager around one experiment::

    with Experiment(link, name="relay tilt", cancel=flag, progress=show) as exp:
        exp.hold()                      # arms through the interlock if the motor is off
        exp.mode("relay", loop="tilt", amp=0.5, hyst=0.03, bias=0)
        exp.wait(20.0, until=lambda: tracker_settled, on_block=feed)
    result = exp.result                 # ExperimentResult, also after a guard trip

What it guarantees
- **Arming goes through the board's interlock**: ``arm`` is asked for, never forced; a
  refusal raises :class:`ArmRefused` carrying the board's reasons (``tilt``, ``fault``…).
  A latched fault is not cleared here: that is a person's decision.
- **Guards** (:class:`Guards`), checked on every block of telemetry: |signal| beyond a
  fraction of each ``trip_<signal>`` the board declares (tilt, wheel… PROTOCOL.md §5.2) or
  an explicit limit; telemetry older than ``stale_s``; the link lost; a board ``trip``
  event; a board restart. Any of them sends the kill (``link.kill()``) at once and ends the
  experiment with ``stopped_by`` naming it.
- **Cancel** (any object with ``is_set()``, e.g. ``threading.Event``) ends the experiment
  in an orderly way (``stopped_by='cancelled'``), no kill.
- **Always safe at the end** (``finally``): after a kill the motor is tripped (output
  off, fault latched). Otherwise the board goes back to what was found: closed loop
  (``hold``) if the motor was running in ``hold``, else mode ``off`` and, if the motor was
  off, ``disarm``. Parameters named in ``restore`` are set back (one atomic ``set``). If
  the orderly way fails, the kill is sent.
- Telemetry is pulled by cursor in the caller's thread (never in the link's reader), kept
  in memory and, with ``results_dir``, recorded by rigbench.recordings.recording.Recorder (CSV + YAML
  sidecar with events and notes). Progress callbacks run in the caller's thread too.

All times are link-clock seconds (virtual for a simulated board with ``clock=virtual``).
Values are in the board's declared units.
"""

from __future__ import annotations

import logging
import math
import re
from pathlib import Path

import numpy as np

from rigbench.link import BoardRefused, LinkError, LinkLost
from rigbench.link.killing import CUT_POWER
from rigbench.recordings.recording import Recorder

from rigbench.base.stops import kills_motor
from rigbench.experiments.guards import (
    STOP_REASONS, ArmRefused, ExperimentResult, ExperimentStopped, Guards, Progress,
    guard_limits,
)

log = logging.getLogger(__name__)

__all__ = ["Experiment", "ExperimentResult", "ExperimentStopped", "ArmRefused", "Guards",
           "Progress", "STOP_REASONS", "guard_limits"]

log = logging.getLogger(__name__)


EVENTS_KEPT = 100_000  # events one experiment keeps in memory (its recording keeps its own)


class Experiment:
    """One guarded experiment on a link (see the module docstring)."""

    def __init__(self, link, *, name: str, guards: Guards | None = None, cancel=None,
                 progress=None, results_dir: str | Path | None = None,
                 stream_hz: float | None = None, poll_s: float = 0.05,
                 progress_every_s: float = 0.25, restore=(), max_rows: int = 4_000_000):
        self.link = link
        self.name = name
        self.guards = guards or Guards()
        self.cancel = cancel
        self.progress_cb = progress
        self.results_dir = None if results_dir is None else Path(results_dir)
        self.stream_hz = stream_hz
        self.poll_s = poll_s
        self.progress_every_s = progress_every_s
        self.restore = tuple(restore)
        self.max_rows = max_rows
        self.limits: dict[str, float] = {}
        self.result: ExperimentResult | None = None
        self._blocks: list[tuple[np.ndarray, np.ndarray]] = []
        self._rows = 0
        self._events: list = []
        self.events_dropped = 0  # events past EVENTS_KEPT (a chatty board), not kept
        self._marks: list = []
        self._stop: tuple[str, str] | None = None
        self._killed = False
        self._armed_here = False
        self._recorder: Recorder | None = None
        self._last_progress = -math.inf
        self._last_row_t: float | None = None
        self._skipped = 0

    # ------------------------------------------------------------------ set-up

    def __enter__(self) -> "Experiment":
        link = self.link
        self.limits = guard_limits(link, self.guards)
        st = link.status()
        self.found_motor, self.found_mode = st.motor, st.mode
        if st.motor == "tripped":
            raise ArmRefused(("fault",), f"the board has a latched fault ({st.fault})")
        self.restore_values = link.get(*self.restore) if self.restore else {}
        self.signals = tuple(s.name for s in link.signals)
        self.units = tuple(s.unit for s in link.signals)
        self.stream_actual_hz = link.stream(self.stream_hz or link.info.rate_hz)
        self._tm_cursor = link.telemetry_cursor()
        self._ev_cursor = link.event_cursor()
        self.t0 = link.now()
        if self.results_dir is not None:
            stem = re.sub(r"[^a-z0-9_-]+", "-", self.name.lower()).strip("-") or "experiment"
            path = self.results_dir / f"{stem}.csv"
            n = 1
            while path.exists():
                n += 1
                path = self.results_dir / f"{stem}-{n}.csv"
            self._recorder = Recorder(path, link, background=False,
                                      notes=[f"experiment: {self.name}"]).start()
        self.mark("start")
        return self

    def mark(self, label: str) -> float:
        """Note the start of a phase (kept in the result and the recording's notes)."""
        t = self.link.now()
        self._marks.append((t, label))
        if self._recorder is not None:
            self._recorder.note(label)
        return t

    # ------------------------------------------------------------------ board modes

    def hold(self) -> None:
        """Closed loop with the current gains; arms through the interlock first if needed."""
        link = self.link
        motor = link.status().motor
        if motor == "tripped":
            self._halt("trip", "the motor is tripped")
        if motor == "off":
            try:
                link.arm()
            except BoardRefused as exc:
                if exc.code == "interlock":
                    raise ArmRefused(tuple(r for r in exc.text.split(",") if r),
                                     f"the board refused to arm: {exc.text}") from None
                raise
            self._armed_here = True
        self.mode("hold")

    def mode(self, name: str, **fields) -> dict:
        """Change the board's mode (PROTOCOL.md §8); returns the applied fields."""
        self._check()
        try:
            applied = self.link.mode(name, **fields)
        except BoardRefused:
            self._pull()   # a trip the board sent before refusing stops the run as a trip
            raise
        self.mark(f"mode {name}" + "".join(f" {k}={v}" for k, v in fields.items()))
        return applied

    def set(self, **values) -> dict:
        """Set parameters atomically (PROTOCOL.md §5.5); refused ones raise BoardRefused."""
        self._check()
        try:
            applied = self.link.set(**values)
        except BoardRefused:
            self._pull()
            raise
        self.mark("set " + " ".join(f"{k}={v:g}" for k, v in applied.items()
                                    if isinstance(v, float)))
        return applied

    # ------------------------------------------------------------------ waiting and data

    def wait(self, seconds: float, *, until=None, on_block=None) -> bool:
        """Let ``seconds`` of link time pass while pulling telemetry and checking guards.

        ``on_block(t_s, values)`` is called for every new block of rows; ``until()`` is
        checked after each poll and ends the wait early (returns True). Raises
        :class:`ExperimentStopped` when a guard, cancel or the link stops the run.
        """
        end = self.link.now() + seconds
        while True:
            self._check()
            now = self.link.now()
            if now >= end - 1e-9:
                return False
            try:
                self.link.sleep(min(self.poll_s, end - now))
            except LinkLost as exc:
                self._halt("lost", str(exc))
            except LinkError as exc:
                self._halt("lost", str(exc))
            block = self._pull()
            self._check()
            if block is not None and on_block is not None:
                on_block(*block)
            if until is not None and until():
                return True

    def _pull(self):
        link = self.link
        self._tm_cursor, blk = link.read_since(self._tm_cursor)
        self._ev_cursor, events = link.events_since(self._ev_cursor)
        if self._recorder is not None:
            self._recorder.poll()
            if self._recorder.failed:
                self._halt("disk", self._recorder.failed)
        self._skipped += blk.skipped
        room = EVENTS_KEPT - len(self._events)  # a board flooding events cannot fill memory
        self._events.extend(events[:max(room, 0)])
        self.events_dropped += max(len(events) - max(room, 0), 0)
        out = None
        if len(blk) and blk.signals == self.signals:
            t, vals = blk.host_time_s.copy(), blk.values.copy()
            self._last_row_t = float(t[-1])
            if self._rows < self.max_rows:
                self._blocks.append((t, vals))
                self._rows += len(t)
            out = (t, vals)
        for ev in events:
            if ev.kind == "trip":
                value = ev.get("value")
                self._halt("trip", f"the board tripped: {ev.get('cause', '?')}"
                           + (f" ({value})" if value is not None else ""))
            if ev.source == "link" and ev.kind in ("reset", "lost"):
                self._halt("reset" if ev.kind == "reset" else "lost",
                           f"link {ev.kind}: {ev.fields}")
        if len(blk) and blk.signals != self.signals:
            self._halt("reset", "the board changed its signals")
        if out is not None:
            for name, limit in self.limits.items():
                i = self.signals.index(name)
                peak = float(np.max(np.abs(out[1][:, i])))
                if peak > limit:
                    self._halt("guard", f"|{name}| reached {peak:.4g} {self.units[i]}, guard "
                                        f"{limit:.4g} {self.units[i]}")
        return out

    def _check(self) -> None:
        if self._stop is not None:
            raise ExperimentStopped(*self._stop)
        if self.cancel is not None and self.cancel.is_set():
            self._stop = ("cancelled", "cancelled by the user")
            raise ExperimentStopped(*self._stop)
        link = self.link
        if link.state == "lost":
            self._halt("lost", link.health().lost_reason or "link lost")
        now = link.now()
        last = self._last_row_t
        if last is None or now - last > self.guards.stale_s:
            # rows that came while this thread waited on a request (a lost reply settled by
            # asking status takes a few reply timeouts) are in the ring, not pulled yet
            newest = link.snapshot(rows=1)
            if len(newest):
                last = max(last if last is not None else -float("inf"),
                           float(newest.host_time_s[-1]))
                if last < self.t0:
                    last = None
        if last is None:
            if now - self.t0 > max(self.guards.startup_s, self.guards.stale_s):
                self._halt("stale", f"no telemetry within {now - self.t0:.2f} s")
        elif now - last > self.guards.stale_s:
            self._halt("stale", f"telemetry {now - last:.2f} s old (limit "
                                f"{self.guards.stale_s:g} s)")

    def halt(self, reason: str, detail: str):
        """Stop for ``reason`` (a key of rigbench.base.stops.STOPS); raises ExperimentStopped."""
        self._halt(reason, detail)

    def _halt(self, reason: str, detail: str):
        """Stop now: kill for a safety reason, then raise ExperimentStopped."""
        if self._stop is None:
            self._stop = (reason, detail)
            if kills_motor(reason):
                self._kill()
        raise ExperimentStopped(*self._stop)

    def _kill(self) -> None:
        if self._killed:
            return
        self._killed = True
        try:
            # a kill the board does not confirm escalates (framed kill, disarm, heartbeat
            # stopped for its watchdog: rigbench.link.killing)
            outcome = self.link.kill_confirmed(reason=f"guard:{self._stop[0]}")
        except LinkError as exc:
            outcome = None  # nothing left to send it on; the board's watchdog stops the motor
            log.warning("experiment %r: kill not sent (%s); relying on the board's watchdog",
                        self.name, exc)
        self._marks.append((self.link.now(), "kill"))
        if outcome is not None and outcome.escalated:
            self._marks.append((self.link.now(), "kill unconfirmed: " + ", ".join(outcome.steps)))
            self._stop = (self._stop[0], f"{self._stop[1]}; {CUT_POWER}")

    def data(self) -> tuple[np.ndarray, np.ndarray]:
        """All rows so far: (t_s, values)."""
        if not self._blocks:
            return np.zeros(0), np.zeros((0, len(self.signals)))
        t = np.concatenate([b[0] for b in self._blocks])
        v = np.vstack([b[1] for b in self._blocks])
        self._blocks = [(t, v)]
        return t, v

    def column(self, name: str) -> np.ndarray:
        return self.data()[1][:, self.signals.index(name)]

    def elapsed_s(self) -> float:
        return self.link.now() - self.t0

    def report(self, phase: str, *, budget_s: float | None = None,
               fraction: float | None = None, force: bool = False, **kw) -> None:
        """Call the progress callback (throttled to ``progress_every_s`` of link time)."""
        if self.progress_cb is None:
            return
        now = self.link.now()
        if not force and now - self._last_progress < self.progress_every_s:
            return
        self._last_progress = now
        self.progress_cb(Progress(self.name, phase, now - self.t0, budget_s, fraction, **kw))

    # ------------------------------------------------------------------ the end

    def __exit__(self, exc_type, exc, tb) -> bool:
        if exc_type is not None and not issubclass(exc_type, ExperimentStopped):
            if self._stop is None and issubclass(exc_type, KeyboardInterrupt):
                self._stop = ("cancelled", "interrupted")
            elif self._stop is None:
                self._stop = ("error", f"{exc_type.__name__}: {exc}")
        if self._stop is None:
            self._stop = ("done", "")
        self._leave_safe()
        t, v = self.data()
        rec_path = None
        if self._recorder is not None:
            rec_path = self._recorder.path
            try:
                self._recorder.note(f"stopped by {self._stop[0]}: {self._stop[1]}")
                self._recorder.close()
            except Exception:  # noqa: BLE001 - a failed recording must not hide the result
                log.warning("experiment %r: recording %s not closed cleanly", self.name,
                            rec_path, exc_info=True)
            if self._recorder.failed and self._stop[0] in ("done", "converged"):
                self._stop = ("disk", self._recorder.failed)  # the motor was left safe already
        motor = None
        try:
            motor = self.link.status().motor
        except (LinkError, BoardRefused):
            motor = self.link.motor_state
        self.result = ExperimentResult(
            self.name, self._stop[0], self._stop[1], self.signals, self.units, t, v,
            list(self._events), list(self._marks), self.t0, self.link.now(), self._killed,
            motor, rec_path, self._skipped)
        return exc_type is not None and issubclass(exc_type, ExperimentStopped)

    def _leave_safe(self) -> None:
        """Back to the closed loop that was found, or motor off; kill if that fails."""
        if self._killed:
            return
        link = self.link
        try:
            if self.found_motor == "running" and self.found_mode == "hold":
                link.mode("hold")
            else:
                link.mode("off")
                if self.found_motor == "off" or self._armed_here:
                    link.disarm()
            if self.restore_values:
                link.set(**self.restore_values)
            self.mark("left safe")
        except (LinkError, BoardRefused) as exc:
            if self._stop[0] in ("done", "cancelled"):
                self._stop = ("error", f"could not leave the rig safely ({exc}): killed")
            self._kill()
