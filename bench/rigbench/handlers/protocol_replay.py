"""pyserial URL handler ``replay://PATH``: a recording played back as a read-only board.

    replay://results/run-1/quiet.csv               relative to the working folder
    replay:///home/me/rig/results/run-1/quiet.csv  absolute (three slashes)
    replay://quiet.csv?clock=virtual&speed=4&loop=1

The recording is a CSV with its YAML sidecar (rigbench.recordings.recording); the board behind the port
is rigbench.rig.replay (answers discovery and status from the sidecar, refuses
every change with "replay is read-only", streams the recorded rows at their recorded
times). So ``Link.open``, ``rigbench info``/``watch``, the UI and analysis run on old
data unchanged.

Options (``parse_replay_url``, a pure function; each at most once, unknown ones raise):
- ``clock=real`` (default): paced by the wall clock; ``clock=virtual``: replay time moves
  only as the host reads (like ``sim://...?clock=virtual``), as fast as the host asks.
- ``speed=X`` (0 < X ≤ 1000, default 1): X recorded seconds per second of the port's clock.
- ``loop=1``: start over after the end (default ``0``: after the end only status frames).

Attributes beyond pyserial's: ``clock`` (the port's clock, RealClock from
rigbench.base.clock or VirtualClock from rigbench.rig.clock), ``board`` (the ReplayBoard), ``options``.

Line settings, modem lines and the output side come from ``rigbench.handlers.board_port``.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import parse_qsl, unquote, urlsplit

from serial.serialutil import SerialException

from rigbench.recordings.recording import RecordingError, load_recording
from rigbench.base.clock import RealClock
from rigbench.rig.clock import VirtualClock

from rigbench.handlers.board_port import BoardPort
from rigbench.rig.replay import ReplayBoard

__all__ = ["Serial", "ReplayOptions", "parse_replay_url"]

VIRTUAL_IDLE_S = 0.02      # port-clock time a virtual read waits for output
_OPTIONS = ("clock", "speed", "loop")


@dataclass(frozen=True)
class ReplayOptions:
    path: str
    clock: str = "real"
    speed: float = 1.0
    loop: bool = False


def parse_replay_url(url: str) -> ReplayOptions:
    """``replay://PATH?options`` → ReplayOptions; ValueError naming what is wrong."""
    parts = urlsplit(url)
    if parts.scheme != "replay":
        raise ValueError(f"{url!r} is not a replay:// URL")
    path = unquote(parts.netloc + parts.path)
    if not path:
        raise ValueError("replay:// needs the path of a recording (.csv)")
    if not path.lower().endswith(".csv"):
        raise ValueError(f"replay://{path}: give the recording's .csv file")
    seen: dict[str, str] = {}
    for key, value in parse_qsl(parts.query, keep_blank_values=True, strict_parsing=False):
        if key not in _OPTIONS:
            raise ValueError(f"replay:// option {key!r} is unknown; options: "
                             f"{', '.join(_OPTIONS)}")
        if key in seen:
            raise ValueError(f"replay:// option {key!r} is given twice")
        seen[key] = value
    clock = seen.get("clock", "real")
    if clock not in ("real", "virtual"):
        raise ValueError(f"replay:// option clock={clock!r}: use real or virtual")
    try:
        speed = float(seen.get("speed", "1"))
    except ValueError:
        raise ValueError(f"replay:// option speed={seen['speed']!r} is not a number") from None
    if not 0 < speed <= 1000:
        raise ValueError(f"replay:// option speed={speed:g} must lie in (0, 1000]")
    loop = seen.get("loop", "0")
    if loop not in ("0", "1"):
        raise ValueError(f"replay:// option loop={loop!r}: use 0 or 1")
    return ReplayOptions(path, clock, speed, loop == "1")


class Serial(BoardPort):
    """A replayed recording as a serial port (see the module docstring)."""

    def __init__(self, *args, **kwargs) -> None:
        self.board: ReplayBoard | None = None
        self.clock = None
        self.options: ReplayOptions | None = None
        self._lock = threading.RLock()
        self._cancel = False
        self._t_open = 0.0
        super().__init__(*args, **kwargs)

    # ------------------------------------------------------------------ open / close

    def open(self) -> None:
        self._check_can_open()
        try:
            self.options = parse_replay_url(self._port)
            rec = load_recording(Path(self.options.path))
            self.board = ReplayBoard(rec, loop=self.options.loop)
        except (ValueError, RecordingError) as exc:
            raise SerialException(f"could not open {self._port}: {exc}") from None
        self.clock = VirtualClock() if self.options.clock == "virtual" else RealClock()
        self._t_open = self.clock.now()
        self.is_open = True

    def close(self) -> None:
        self.is_open = False

    def from_url(self, url: str) -> str:
        parse_replay_url(url)
        return url

    # ------------------------------------------------------------------ time

    def _tau(self) -> float:
        return (self.clock.now() - self._t_open) * self.options.speed

    def _catch_up(self) -> None:
        with self._lock:
            self.board.advance(self._tau())

    def _step_virtual(self, limit_s: float) -> None:
        """Move virtual time to the next output, or by ``limit_s`` when nothing comes."""
        board, clock, speed = self.board, self.clock, self.options.speed
        end = clock.now() + limit_s
        while not board.out and not self._cancel:
            now = clock.now()
            target = min(max(self._t_open + board.next_due() / speed, now), end)
            with self._lock:
                board.advance((target - self._t_open) * speed)
            if not board.out and target <= now:  # nothing came of it: let time move on
                target = min(now + board.dt_s / speed, end)
                with self._lock:
                    board.advance((target - self._t_open) * speed)
            clock.advance_to(target)
            if target >= end:
                break
        self._cancel = False

    # ------------------------------------------------------------------ pyserial API

    @property
    def in_waiting(self) -> int:
        self._check_open()
        if self.clock.virtual:
            if not self.board.out:
                self._step_virtual(VIRTUAL_IDLE_S)
        else:
            self._catch_up()
        return len(self.board.out)

    def read(self, size: int = 1) -> bytes:
        self._check_open()
        if size <= 0:
            return b""
        board = self.board
        if self.clock.virtual:
            if not board.out:
                limit = VIRTUAL_IDLE_S if self._timeout is None else min(self._timeout,
                                                                         VIRTUAL_IDLE_S)
                self._step_virtual(limit)
            with self._lock:
                return board.drain(size)
        deadline = None if self._timeout is None else time.monotonic() + self._timeout
        while True:
            self._catch_up()
            if len(board.out) >= size or self._cancel or not self.is_open:
                break
            now = time.monotonic()
            if deadline is not None and now >= deadline:
                break
            wake = self._t_open + board.next_due() / self.options.speed
            pause = max(min(wake - self.clock.now(), 0.05), 0.0005)
            if deadline is not None:
                pause = min(pause, max(deadline - now, 0.0))
            time.sleep(pause)
        self._cancel = False
        with self._lock:
            return board.drain(size)

    def write(self, data) -> int:
        self._check_open()
        data = bytes(data)
        with self._lock:
            if not self.clock.virtual:
                self.board.advance(self._tau())
            self.board.receive(data)
        return len(data)

    def reset_input_buffer(self) -> None:
        self._check_open()
        with self._lock:
            self.board.drain()

    def cancel_read(self) -> None:
        self._cancel = True
