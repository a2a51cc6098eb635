"""Bounded stores the reader thread fills and other threads read by cursor.

``TelemetryRing``: a lock-protected numpy ring of telemetry rows (host time s, board time s,
frame number, one column per declared signal). ``CursorLog``: a bounded log of any items.
Readers keep a cursor (a count of items ever appended) and ask for what came since; if
they fall more than the capacity behind, the oldest items are gone and the reply says how
many were skipped. Nothing here calls back into readers.
"""

from __future__ import annotations

import threading
from collections import deque
from dataclasses import dataclass

import numpy as np

FIXED = 3  # host_time_s, board_time_s, frame


@dataclass(frozen=True, eq=False)
class TelemetryBlock:
    """Telemetry rows in arrival order; ``values[:, i]`` is signal ``signals[i]``."""

    signals: tuple[str, ...]
    units: tuple[str, ...]
    host_time_s: np.ndarray
    board_time_s: np.ndarray
    frame: np.ndarray  # int64, unwrapped frame counter
    values: np.ndarray  # shape (rows, len(signals))
    skipped: int = 0  # rows lost to ring overrun before the first row here

    def __len__(self) -> int:
        return len(self.host_time_s)

    def column(self, name: str) -> np.ndarray:
        try:
            return self.values[:, self.signals.index(name)]
        except ValueError:
            raise KeyError(f"no signal {name!r}; have {', '.join(self.signals)}") from None


class TelemetryRing:
    """Fixed-size ring of telemetry rows. Appends and reads are whole-row, under one lock."""

    def __init__(self, signals=(), units=(), rows: int = 65536) -> None:
        if rows < 1:
            raise ValueError("ring needs at least one row")
        self.size = int(rows)
        self._lock = threading.Lock()
        self.written = 0  # cursor space: rows ever appended
        self._set_layout(tuple(signals), tuple(units))

    def _set_layout(self, signals, units) -> None:
        self.signals, self.units = signals, units
        self._data = np.zeros((self.size, FIXED + len(signals)))
        self._base = self.written  # rows before this are from another layout: gone

    def relayout(self, signals, units) -> None:
        """New signal list (the board changed after a restart): earlier rows are dropped."""
        with self._lock:
            if tuple(signals) != self.signals or tuple(units) != self.units:
                self._set_layout(tuple(signals), tuple(units))

    @property
    def width(self) -> int:
        return FIXED + len(self.signals)

    def append(self, rows: np.ndarray) -> None:
        """Append an array of shape (k, width)."""
        k = len(rows)
        if not k:
            return
        with self._lock:
            if rows.shape[1] != self._data.shape[1]:
                raise ValueError(f"row width {rows.shape[1]} != ring width {self._data.shape[1]}")
            if k > self.size:
                self.written += k - self.size
                rows, k = rows[-self.size:], self.size
            start = self.written % self.size
            first = min(k, self.size - start)
            self._data[start:start + first] = rows[:first]
            if first < k:
                self._data[: k - first] = rows[first:]
            self.written += k

    def cursor(self) -> int:
        with self._lock:
            return self.written

    def _copy(self, start: int, end: int) -> np.ndarray:
        n = end - start  # never more than size
        if n <= 0:
            return np.empty((0, self._data.shape[1]))
        a = start % self.size
        if a + n <= self.size:
            return self._data[a:a + n].copy()
        return np.concatenate((self._data[a:], self._data[: a + n - self.size]))

    def _block(self, rows: np.ndarray, skipped: int) -> TelemetryBlock:
        return TelemetryBlock(
            self.signals, self.units, rows[:, 0], rows[:, 1], rows[:, 2].astype(np.int64),
            rows[:, FIXED:], skipped,
        )

    def read_since(self, cursor: int) -> tuple[int, TelemetryBlock]:
        """Rows appended after ``cursor``; returns the new cursor and the rows."""
        with self._lock:
            end = self.written
            if cursor > end or cursor < 0:
                raise ValueError(f"cursor {cursor} is not from this link (now {end})")
            oldest = max(self._base, end - self.size)
            start = max(cursor, oldest)
            return end, self._block(self._copy(start, end), start - cursor)

    def snapshot(self, seconds: float | None = None, rows: int | None = None) -> TelemetryBlock:
        """The newest rows: all held, the last ``rows``, or those within ``seconds`` of the
        newest row's host time."""
        with self._lock:
            end = self.written
            start = max(self._base, end - self.size)
            if rows is not None:
                start = max(start, end - int(rows))
            data = self._copy(start, end)
        if seconds is not None and len(data):
            t = data[:, 0]
            data = data[int(np.searchsorted(t, t[-1] - seconds, side="left")):]
        return self._block(data, 0)


class CursorLog:
    """A bounded, thread-safe log read by cursor, like TelemetryRing but for any item."""

    def __init__(self, maxlen: int = 1000) -> None:
        self._items: deque = deque(maxlen=maxlen)
        self._lock = threading.Lock()
        self.written = 0

    def append(self, item) -> None:
        with self._lock:
            self._items.append(item)
            self.written += 1

    def cursor(self) -> int:
        with self._lock:
            return self.written

    def since(self, cursor: int) -> tuple[int, list]:
        with self._lock:
            end = self.written
            if cursor > end or cursor < 0:
                raise ValueError(f"cursor {cursor} is not from this log (now {end})")
            held = len(self._items)
            first = max(cursor, end - held)
            return end, list(self._items)[held - (end - first):]

    def last(self, n: int = 1) -> list:
        with self._lock:
            return list(self._items)[-n:] if n > 0 else []
