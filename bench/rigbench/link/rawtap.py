"""The link's raw tap: the bytes that crossed the port, kept as whole lines per direction
for a console (``Link.raw_since``).

Reads and writes come in chunks that cut lines anywhere; the tap keeps the unfinished tail
of each direction and records a line when its LF arrives, stamped with that arrival time.
A tail is bounded: a line longer than ``line_max`` bytes is recorded as soon as it passes
the bound, cut there and marked, and the rest of it is dropped up to the next LF (the
protocol's lines are at most 200 bytes, LF included: PROTOCOL.md §2). The kill byte acts
wherever it is found (§7.1), so a run of kill bytes is a line of its own and ends any
unfinished one (recorded, marked cut).

Cheap on the reader's path (2 kHz telemetry): one ``split`` per chunk and one log append
per chunk holding its finished lines; text conversion happens when a reader asks.

Bounded whatever the board sends: empty lines (a board that sends only LF) are counted in
``blank_lines`` and not kept, and a chunk keeps at most ``chunk_lines`` lines (its newest;
the rest are counted in ``dropped_lines``), so the log holds at most
``chunks × chunk_lines`` lines of at most ``line_max`` bytes.

"""

from __future__ import annotations

import re
import threading

from rigbench.wire.codec import KILL

from rigbench.link.records import RawLine
from rigbench.link.ring import CursorLog

_UNPRINTABLE = re.compile(rb"[^\x20-\x7e]")
_KILL_RUN = re.compile(re.escape(KILL) + b"+")


class _Tail:
    """The unfinished line of one direction."""

    __slots__ = ("buf", "cut", "lock")

    def __init__(self) -> None:
        self.buf = b""
        self.cut = False  # the line passed the bound: recorded already, dropping to LF
        self.lock = threading.Lock()


class RawTap:
    """Whole lines of both directions (``>`` to the board, ``<`` from it) in a bounded log
    read by cursor. ``record`` may be called from several threads."""

    def __init__(self, chunks: int = 4096, *, line_max: int = 200,
                 chunk_lines: int = 32) -> None:
        if line_max < 1 or chunk_lines < 1:
            raise ValueError(f"line_max and chunk_lines must be at least 1, not {line_max},"
                             f" {chunk_lines}")
        self.line_max = line_max
        self.chunk_lines = chunk_lines
        self.blank_lines = 0  # empty lines seen, not kept
        self.dropped_lines = 0  # lines past ``chunk_lines`` in one chunk, not kept
        self.log = CursorLog(chunks)  # (time, direction, ((bytes, cut), ...)) per chunk
        self._tails = {">": _Tail(), "<": _Tail()}

    def record(self, t: float, direction: str, data: bytes) -> None:
        """Take one chunk read or written at link-clock time ``t``."""
        tail = self._tails[direction]
        with tail.lock:
            if KILL in data:
                lines: list = []
                start = 0
                for m in _KILL_RUN.finditer(data):
                    self._lines(tail, data[start:m.start()], lines)
                    if tail.buf or tail.cut:
                        if not tail.cut:
                            lines.append((tail.buf, True))
                        tail.buf, tail.cut = b"", False
                    lines.append((m.group(), False))
                    start = m.end()
                self._lines(tail, data[start:], lines)
            else:
                lines = []
                self._lines(tail, data, lines)
        if len(lines) > self.chunk_lines:
            self.dropped_lines += len(lines) - self.chunk_lines
            lines = lines[-self.chunk_lines:]
        if lines:
            self.log.append((t, direction, lines))

    def _lines(self, tail: _Tail, data: bytes, out: list) -> None:
        if not data:
            return
        pieces = data.split(b"\n")
        last = len(pieces) - 1
        bound = self.line_max
        for i, piece in enumerate(pieces):
            if tail.cut:  # inside an over-long line already recorded
                if i < last:
                    tail.cut = False
                continue
            if tail.buf:
                piece = tail.buf + piece
                tail.buf = b""
            if len(piece) > bound:
                out.append((piece[:bound], True))
                tail.cut = i == last  # the LF ending it is still to come
            elif i < last:
                if piece and piece != b"\r":
                    out.append((piece, False))
                else:
                    self.blank_lines += 1
            else:
                tail.buf = piece

    def cursor(self) -> int:
        return self.log.cursor()

    def since(self, cursor: int) -> tuple[int, list[RawLine]]:
        """Finished lines recorded since ``cursor`` (a count of chunks), as console text."""
        cursor, chunks = self.log.since(cursor)
        return cursor, raw_lines(chunks)


def _printable(data: bytes) -> str:
    data = data[:-1] if data.endswith(b"\r") else data
    return _UNPRINTABLE.sub(lambda m: b"\\x%02x" % m.group()[0], data).decode("ascii")


def raw_lines(chunks) -> list[RawLine]:
    """Console lines from the tap's records; empty lines are left out."""
    out = []
    for t, direction, lines in chunks:
        for data, cut in lines:
            if data:
                out.append(RawLine(t, direction, _printable(data), cut))
    return out
