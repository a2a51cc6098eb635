"""Board time and frame counters seen from the host: 32-bit unwrapping, gaps, resets, and
the mapping of board time onto the link clock.

PROTOCOL.md §6.1: ``tm <frame> <time_us>``: the frame counter counts every frame the board
produced (dropped ones too) and wraps at 2³²; ``time_us`` is the board's microsecond clock,
32-bit, wrapping about every 71.6 minutes. The host unwraps both. A step backwards larger
than a small tolerance cannot be a wrap: it means the board restarted.

Pure arithmetic, no I/O or threads.
"""

from __future__ import annotations

from dataclasses import dataclass

U32 = 1 << 32
HALF = 1 << 31


@dataclass(frozen=True)
class TimeStep:
    """Result of feeding one board time stamp."""

    seconds: float  # unwrapped board time, s since the board's clock started
    went_back: bool  # the board's clock jumped backwards: the board restarted


class BoardClock:
    """Unwraps the board's 32-bit microsecond clock into seconds.

    A stamp earlier than the latest one by at most ``back_tolerance_s`` (a frame sent a
    little out of order) is placed before it without touching the wrap count; an earlier
    stamp beyond that means a restart: ``went_back`` is True and the caller calls
    ``restart``. A forward step of less than half the range is taken as forward, so a wrap
    is recognised whenever frames arrive more often than every 35 minutes.
    """

    def __init__(self, *, back_tolerance_s: float = 1.0) -> None:
        self.back_tolerance_us = int(back_tolerance_s * 1e6)
        self._last_raw: int | None = None
        self._last_total = 0
        self.wraps = 0

    def restart(self) -> None:
        self._last_raw = None
        self._last_total = 0

    def update(self, time_us: int) -> TimeStep:
        raw = int(time_us) % U32
        if self._last_raw is None:
            self._last_raw, self._last_total = raw, raw
            return TimeStep(raw * 1e-6, False)
        ahead = (raw - self._last_raw) % U32
        if ahead < HALF:
            if raw < self._last_raw:
                self.wraps += 1
            self._last_total += ahead
            self._last_raw = raw
            return TimeStep(self._last_total * 1e-6, False)
        back = U32 - ahead
        if back <= self.back_tolerance_us:
            return TimeStep((self._last_total - back) * 1e-6, False)
        return TimeStep(raw * 1e-6, True)


@dataclass(frozen=True)
class CounterStep:
    total: int  # unwrapped frame number
    gap: int  # frames missing between the previous frame and this one
    went_back: bool  # the counter restarted: the board restarted
    repeated: bool = False


class FrameCounter:
    """Unwraps the 32-bit telemetry frame counter and counts gaps (lost or dropped frames)."""

    def __init__(self) -> None:
        self._last_raw: int | None = None
        self._total = 0

    def restart(self) -> None:
        self._last_raw = None

    def update(self, frame: int) -> CounterStep:
        raw = int(frame) % U32
        if self._last_raw is None:
            self._last_raw, self._total = raw, raw
            return CounterStep(raw, 0, False)
        ahead = (raw - self._last_raw) % U32
        if ahead == 0:
            return CounterStep(self._total, 0, False, repeated=True)
        if ahead < HALF:
            self._last_raw = raw
            self._total += ahead
            return CounterStep(self._total, ahead - 1, False)
        return CounterStep(raw, 0, True)


class ClockMap:
    """Maps unwrapped board time (s) onto the link clock (s): host = board + offset.

    Transport only ever adds delay, so the smallest ``host_rx − board`` seen is the best
    offset estimate. It follows a lower value at once and creeps up by at most
    ``drift_per_s`` seconds per board second so that a slow relative drift of the two
    clocks (crystals: tens of ppm; 1e-3 leaves a wide margin) is tracked. Latency jitter of
    the link therefore does not appear in mapped times.
    """

    def __init__(self, *, drift_per_s: float = 1e-3) -> None:
        self.drift_per_s = drift_per_s
        self.offset_s: float | None = None
        self._last_board_s: float | None = None

    def reset(self) -> None:
        self.offset_s = None
        self._last_board_s = None

    def update(self, board_s: float, host_s: float) -> None:
        diff = host_s - board_s
        if self.offset_s is None or self._last_board_s is None or diff <= self.offset_s:
            self.offset_s = diff
        else:
            allowed = self.drift_per_s * max(board_s - self._last_board_s, 0.0)
            self.offset_s += min(diff - self.offset_s, allowed)
        if self._last_board_s is None or board_s > self._last_board_s:
            self._last_board_s = board_s

    def host_time(self, board_s: float) -> float:
        return board_s + (self.offset_s or 0.0)
