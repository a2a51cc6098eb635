"""Recordings: telemetry to CSV with a YAML sidecar, written so that a crash loses < 1 s.

``Recorder(path_csv, link)`` pulls rows, events and status frames from a link by cursor
(``read_since``, ``events_since``, ``statuses_since``) in a small thread, or when you call
``poll()``. The CSV starts with one header line of ``name [unit]`` columns:
``host_time [s]``, ``board_time [s]``, ``frame [1]``, then one column per telemetry signal
in the board's declared units (``numpy.genfromtxt(..., names=True)`` turns these into
``host_time_s``, ``tilt_deg``, ``rate_degs``...). Lines are collected in memory and written
whole, at least every ``flush_s`` seconds of wall time, with one ``os.write`` and an
``fsync``: a crash or unplug leaves a file that ends on a complete line. The sidecar
``<name>.yaml`` holds the board identity, the parameters at the start, events with their
times (board events, link happenings, and changes of motor state, mode or fault seen in
status frames), notes on what ran and counts; it is rewritten atomically at every flush
and at close, with ``complete: false`` until a clean close.

``load_recording(path)`` reads a recording back (arrays plus sidecar); bad input raises
``RecordingError`` naming the file and line.

Domain layer: numpy, pyyaml and bench's leaf helpers only.
"""

from __future__ import annotations

import io
import os
import re
import threading
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import yaml

from rigbench.base.atomic import write_text_atomic
from rigbench.base.jsonsafe import to_plain
from rigbench.base.yamlload import SchemaError, load_yaml

if TYPE_CHECKING:  # pragma: no cover
    from rigbench.link import Link

__all__ = ["Recorder", "Recording", "RecordingError", "load_recording", "sidecar_path"]

FORMAT = "rigbench-recording/1"
FIXED_COLUMNS = (("host_time", "s"), ("board_time", "s"), ("frame", "1"))
SIDECAR_KEYS = ("format", "csv", "columns", "board", "url", "params_at_start", "loops", "started",
                "stopped", "complete", "rows", "rows_skipped", "notes", "events", "link_health")
_HEADER_RE = re.compile(r"([a-z][a-z0-9_]{0,31}) \[([^\[\]]{1,48})\]\Z")


class RecordingError(ValueError):
    """A recording cannot be written or read; the message names the file (and line)."""


def sidecar_path(path_csv: str | Path) -> Path:
    return Path(path_csv).with_suffix(".yaml")


def _wall() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


class Recorder:
    """Record a link's telemetry and events to ``path_csv`` and its sidecar.

    ``flush_s``: longest wall time between disk writes (the most a crash can lose).
    ``poll_s``: how often the background thread pulls from the link; ``background=False``
    leaves pulling to ``poll()``. ``notes``: free text on what ran, kept in the sidecar.
    """

    def __init__(self, path_csv: str | Path, link: "Link", *, flush_s: float = 0.5,
                 poll_s: float = 0.1, background: bool = True, notes=(),
                 overwrite: bool = False) -> None:
        if flush_s <= 0 or poll_s <= 0:
            raise ValueError("flush_s and poll_s must be positive")
        self.path = Path(path_csv)
        self.sidecar = sidecar_path(self.path)
        if self.path.suffix.lower() != ".csv":
            raise RecordingError(f"{self.path}: a recording's file name must end in .csv")
        if not overwrite and self.path.exists():
            raise RecordingError(f"{self.path}: exists already (pass overwrite=True to replace)")
        self.link = link
        self.flush_s, self.poll_s, self.background = flush_s, poll_s, background
        self.rows = 0
        self.rows_skipped = 0
        self.error: BaseException | None = None
        self._notes = [{"host_time_s": None, "text": str(n)} for n in notes]
        self._events: list[dict] = []
        self._pending: list[str] = []
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._fd: int | None = None
        self._closed = False
        self._meta: dict = {}
        # the periodic sidecar rewrite runs on its own thread: a slow disk must not stall
        # the caller (an experiment polls from the thread that checks its guards)
        self._side_cond = threading.Condition()
        self._side_doc: dict | None = None
        self._side_thread: threading.Thread | None = None
        self._side_stop = False

    # ------------------------------------------------------------------ life cycle

    def start(self) -> "Recorder":
        link = self.link
        self.signals = tuple(s.name for s in link.signals)
        units = tuple(s.unit for s in link.signals)
        self._columns = FIXED_COLUMNS + tuple(zip(self.signals, units))
        self._fmt = "%.6f,%.6f,%d" + "".join(",%.6g" for _ in self.signals)
        self._tm_cursor = link.telemetry_cursor()
        self._ev_cursor = link.event_cursor()
        self._st_cursor = link.status_cursor()
        self._state = None  # (motor, mode, loop, fault) of the last status seen
        info = link.info
        self._meta = {
            "format": FORMAT,
            "csv": self.path.name,
            "columns": [{"name": n, "unit": u} for n, u in self._columns],
            "board": None if info is None else {
                "board": info.board, "firmware": info.firmware, "rig": info.rig,
                "protocol": "%d.%d" % info.version, "rate_hz": info.rate_hz,
                "watchdog_ms": info.watchdog_ms, "simulated": info.simulated},
            "url": getattr(link, "url", None),
            "params_at_start": {
                n: {"value": p.value, "unit": p.unit, "min": p.minimum, "max": p.maximum,
                    "writable": p.writable} for n, p in link.params.items()},
            # the loops as the board declared them (PROTOCOL.md §5.4 fields), so a replay of
            # this recording declares them too
            "loops": [dict(lp.to_fields())
                      for lp in getattr(link, "loops", {}).values()],
            "started": {"wall_time": _wall(), "host_time_s": link.now()},
        }
        header = ",".join(f"{n} [{u}]" for n, u in self._columns) + "\n"
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o666)
        self._write_all(header.encode("ascii"))
        self._last_flush = time.monotonic()
        self._write_sidecar(stopped=None, complete=False)
        self._side_thread = threading.Thread(target=self._sidecar_loop, daemon=True,
                                             name=f"recorder sidecar {self.path.name}")
        self._side_thread.start()
        if self.background:
            self._thread = threading.Thread(target=self._run, daemon=True,
                                            name=f"recorder {self.path.name}")
            self._thread.start()
        return self

    def __enter__(self) -> "Recorder":
        return self.start() if self._fd is None else self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Pull what is left, write it, mark the sidecar complete. Safe to call twice."""
        if self._closed or self._fd is None:
            return
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5.0)
        self._stop_sidecar_thread()   # the final sidecar below is the last one written
        with self._lock:
            try:
                self._pull()
                self._flush_locked()
                self._write_sidecar(stopped={"wall_time": _wall(), "host_time_s": self.link.now()},
                                    complete=self.error is None)
            finally:
                os.close(self._fd)
                self._closed = True
        if self.error is not None:
            raise RecordingError(f"{self.path}: recording failed: {self.error}")

    def note(self, text: str) -> None:
        """Add a free note (what ran, what changed) with the link time."""
        with self._lock:
            self._notes.append({"host_time_s": self.link.now(), "text": str(text)})

    # ------------------------------------------------------------------ pulling and writing

    def _run(self) -> None:
        while not self._stop.wait(self.poll_s):
            try:
                self.poll()
            except Exception as exc:  # noqa: BLE001 - kept and raised by close(), no traceback here
                self.error = exc
                return

    def poll(self) -> int:
        """Pull new rows and events from the link; write to disk when ``flush_s`` is due.
        Returns the number of rows pulled."""
        with self._lock:
            if self._closed:
                return 0
            n = self._pull()
            if time.monotonic() - self._last_flush >= self.flush_s:
                self._flush_locked()
            return n

    def flush(self) -> None:
        with self._lock:
            if not self._closed:
                self._flush_locked()

    def _pull(self) -> int:
        self._tm_cursor, block = self.link.read_since(self._tm_cursor)
        self._ev_cursor, events = self.link.events_since(self._ev_cursor)
        for ev in events:
            self._events.append({
                "host_time_s": to_plain(ev.host_time_s), "board_time_s": to_plain(ev.board_time_s),
                "source": ev.source, "kind": ev.kind,
                "fields": {str(k): to_plain(v) for k, v in ev.fields.items()}})
        self._st_cursor, statuses = self.link.statuses_since(self._st_cursor)
        for st in statuses:  # status frames come often: keep only changes of state
            state = (st.motor, st.mode, st.loop, st.fault)
            if state != self._state:
                self._state = state
                self._events.append({
                    "host_time_s": st.host_time_s, "board_time_s": st.board_time_s,
                    "source": "status", "kind": "state",
                    "fields": {"motor": st.motor, "mode": st.mode, "loop": st.loop,
                               "fault": st.fault}})
        self.rows_skipped += block.skipped
        if not len(block):
            return 0
        if block.signals != self.signals:  # the board changed its signals after a restart
            self.rows_skipped += len(block)
            return 0
        table = np.column_stack((block.host_time_s, block.board_time_s,
                                 block.frame.astype(np.float64), block.values))
        buf = io.StringIO()
        np.savetxt(buf, table, fmt=self._fmt)
        self._pending.append(buf.getvalue())
        self.rows += len(block)
        return len(block)

    def _write_all(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            n = os.write(self._fd, view)
            view = view[n:]
        os.fsync(self._fd)

    def _flush_locked(self) -> None:
        if self._pending:
            data = "".join(self._pending).encode("ascii")
            self._pending.clear()
            self._write_all(data)  # whole lines in one write: a crash cannot cut one
        self._last_flush = time.monotonic()
        doc = self._sidecar_doc(stopped=None, complete=False)
        with self._side_cond:             # the writer thread takes the newest one
            self._side_doc = doc
            self._side_cond.notify()

    def _sidecar_loop(self) -> None:
        while True:
            with self._side_cond:
                while self._side_doc is None and not self._side_stop:
                    self._side_cond.wait()
                doc, self._side_doc = self._side_doc, None
                if doc is None:
                    return
            try:
                self._dump_sidecar(doc)
            except Exception as exc:  # noqa: BLE001 - kept and raised by close()
                self.error = exc

    def _stop_sidecar_thread(self) -> None:
        with self._side_cond:
            self._side_stop = True
            self._side_doc = None         # close() writes the final one itself
            self._side_cond.notify()
        if self._side_thread is not None:
            self._side_thread.join(10.0)

    def _write_sidecar(self, *, stopped, complete: bool) -> None:
        self._dump_sidecar(self._sidecar_doc(stopped=stopped, complete=complete))

    def _sidecar_doc(self, *, stopped, complete: bool) -> dict:
        health = None
        try:
            h = self.link.health()
            health = {"state": h.state, "lost_frames": h.lost_frames, "crc_errors": h.crc_errors,
                      "board_drops": h.board_drops, "resets": h.resets}
        except Exception:  # noqa: BLE001 - a link that cannot report still gets recorded
            pass
        doc = dict(self._meta)
        doc.update({"stopped": stopped, "complete": complete, "rows": self.rows,
                    "rows_skipped": self.rows_skipped, "notes": list(self._notes),
                    "events": list(self._events), "link_health": health})
        return doc

    def _dump_sidecar(self, doc: dict) -> None:
        write_text_atomic(self.sidecar, yaml.safe_dump(doc, sort_keys=False,
                                                       default_flow_style=None, width=100))


# ---------------------------------------------------------------------- reading


@dataclass(frozen=True, eq=False)
class Recording:
    """A recording read back: ``values[:, i]`` is ``signals[i]`` in ``units[i]``."""

    path: Path
    signals: tuple[str, ...]
    units: tuple[str, ...]
    host_time_s: np.ndarray
    board_time_s: np.ndarray
    frame: np.ndarray
    values: np.ndarray
    sidecar: dict | None = None
    events: list = field(default_factory=list)

    @property
    def complete(self) -> bool:
        return bool(self.sidecar and self.sidecar.get("complete"))

    def __len__(self) -> int:
        return len(self.host_time_s)

    def signal(self, name: str) -> np.ndarray:
        try:
            return self.values[:, self.signals.index(name)]
        except ValueError:
            raise KeyError(f"{self.path}: no signal {name!r}; have "
                           f"{', '.join(self.signals)}") from None


def _parse_header(path: Path, line: str) -> list[tuple[str, str]]:
    cols = []
    for i, cell in enumerate(line.rstrip("\r\n").split(",")):
        m = _HEADER_RE.match(cell.strip())
        if not m:
            raise RecordingError(f"{path}:1: column {i + 1} {cell.strip()!r} is not 'name [unit]'")
        cols.append((m.group(1), m.group(2)))
    if tuple(cols[:3]) != FIXED_COLUMNS:
        want = ",".join(f"{n} [{u}]" for n, u in FIXED_COLUMNS)
        raise RecordingError(f"{path}:1: a recording starts with the columns {want}")
    return cols


def _find_bad_line(path: Path, lines: list[str], width: int) -> RecordingError:
    for number, line in enumerate(lines[1:], start=2):
        cells = line.rstrip("\r\n").split(",")
        if len(cells) != width:
            return RecordingError(f"{path}:{number}: {len(cells)} values, the header has {width}")
        for j, cell in enumerate(cells):
            try:
                float(cell)
            except ValueError:
                return RecordingError(f"{path}:{number}: column {j + 1} {cell.strip()[:20]!r} "
                                      "is not a number")
        if not line.endswith("\n"):
            return RecordingError(f"{path}:{number}: last line is cut short")
    return RecordingError(f"{path}: cannot read the values")


def _load_sidecar(path: Path, columns) -> dict | None:
    if not path.exists():
        return None
    try:
        root = load_yaml(path)
        meta = root.mapping(required=("format", "csv", "columns"), optional=SIDECAR_KEYS)
        if meta["format"].text() != FORMAT:
            raise meta["format"].error(f"expected {FORMAT}")
        declared = [(c.mapping(required=("name", "unit")).cursor.value["name"],
                     c.value["unit"]) for c in meta["columns"].items()]
        if [tuple(map(str, d)) for d in declared] != [tuple(c) for c in columns]:
            raise meta["columns"].error("do not match the CSV header")
    except SchemaError as exc:
        raise RecordingError(str(exc)) from None
    return dict(root.value)


def load_recording(path: str | Path) -> Recording:
    """Read a recording's CSV and its sidecar (if present). Raises RecordingError."""
    path = Path(path)
    try:
        text = path.read_text(encoding="ascii")
    except (OSError, UnicodeDecodeError) as exc:
        raise RecordingError(f"{path}: cannot read: {exc}") from None
    lines = text.splitlines(keepends=True)
    if not lines:
        raise RecordingError(f"{path}:1: empty file, no header")
    columns = _parse_header(path, lines[0])
    width = len(columns)
    if len(lines) > 1 and not lines[-1].endswith("\n"):
        raise _find_bad_line(path, lines, width)
    if not any(ln.strip() for ln in lines[1:]):     # a header and no rows (yet)
        data = np.empty((0, width))
    else:
        try:
            data = np.loadtxt(io.StringIO(text), delimiter=",", skiprows=1, ndmin=2,
                              dtype=np.float64)
        except ValueError:
            raise _find_bad_line(path, lines, width) from None
    if data.size == 0:
        data = np.empty((0, width))
    elif data.shape[1] != width:
        raise _find_bad_line(path, lines, width)
    sidecar = _load_sidecar(sidecar_path(path), columns)
    signals = tuple(n for n, _ in columns[3:])
    return Recording(path, signals, tuple(u for _, u in columns[3:]), data[:, 0], data[:, 1],
                     data[:, 2].astype(np.int64), data[:, 3:], sidecar,
                     list(sidecar.get("events") or []) if sidecar else [])
