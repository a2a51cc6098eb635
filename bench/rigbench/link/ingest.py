"""What the reader thread does with decoded frames: telemetry into the ring, status and
events into logs, board time unwrapped and mapped, frame gaps and board restarts counted.

Runs in the reader thread only; other threads read its stores (ring, logs: locked) and its
plain attributes (``last_status``, ``motor_state``, counters: single assignments). A board
restart (``ev boot``, or its clock or frame counter going back: PROTOCOL.md §6.1, §6.3)
latches ``handshake_needed`` and sets ``reset_seen``; the Link's resync thread, never the
reader, then handshakes again.
"""

from __future__ import annotations

import threading

import numpy as np

from rigbench.wire.codec import BadFrame, KillByte
from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.messages import Err, Event, Ok, Status, Telemetry

from rigbench.link.records import BoardStatus, LinkEvent
from rigbench.link.ring import CursorLog, TelemetryRing
from rigbench.link.timebase import BoardClock, ClockMap, FrameCounter


class Ingest:
    """Sorts decoded board frames. ``handle`` returns the replies (Ok/Err) for matching."""

    def __init__(self, *, ring_rows: int = 65536, event_rows: int = 2000,
                 status_rows: int = 2000) -> None:
        self.ring = TelemetryRing((), (), ring_rows)
        self.events = CursorLog(event_rows)
        self.statuses = CursorLog(status_rows)
        self.reset_seen = threading.Event()
        self.handshake_needed = True  # latched from open or a restart until a handshake
        self.last_status: BoardStatus | None = None
        self.motor_state: str | None = None
        self.stop_reports = 0  # frames that reported the motor off or tripped (killing.py)
        self.bad_frames: dict[str, int] = {}
        self.c = dict(rx_frames=0, tm_rows=0, lost_frames=0, repeated=0, resets=0,
                      resyncs=0, unplaced_rows=0)
        self._nsig: int | None = None
        self._board_clock = BoardClock()
        self._counter = FrameCounter()
        self._clock_map = ClockMap()

    # ------------------------------------------------------------------ layout, resets

    def set_layout(self, names, units) -> None:
        self.ring.relayout(tuple(names), tuple(units))
        self._nsig = len(names)

    def handshake_done(self, now: float, *, resync: bool) -> None:
        self.handshake_needed = False
        self.reset_seen.clear()
        if resync:
            self.c["resyncs"] += 1
            self.events.append(LinkEvent(now, None, "link", "resync", {}))

    def _on_reset(self, now: float, why: str) -> None:
        self._board_clock.restart()
        self._counter.restart()
        self._clock_map.reset()
        if self.handshake_needed:
            return  # the same restart seen twice, or still opening: one handshake covers it
        self.handshake_needed = True
        self.c["resets"] += 1
        self.events.append(LinkEvent(now, None, "link", "reset", {"why": why}))
        self.reset_seen.set()

    def host_time(self, board_s: float) -> float:
        return self._clock_map.host_time(board_s)

    def _bad(self, code: str) -> None:
        self.bad_frames[code] = self.bad_frames.get(code, 0) + 1

    # ------------------------------------------------------------------ frames

    def handle(self, events: list, now: float) -> list:
        replies, rows = [], []
        for ev in events:
            kind = type(ev)
            if kind is Telemetry:
                self.c["rx_frames"] += 1
                row = self._telemetry(ev, now)
                if row is not None:
                    rows.append(row)
            elif kind is Ok or kind is Err:
                self.c["rx_frames"] += 1
                replies.append(ev)
                if kind is Ok and ev.get("motor"):
                    self.motor_state = ev.get("motor")
                    if self.motor_state in ("off", "tripped"):
                        self.stop_reports += 1
            elif kind is Status:
                self.c["rx_frames"] += 1
                self._status(ev, now)
            elif kind is Event:
                self.c["rx_frames"] += 1
                self._event(ev, now)
            elif kind is BadFrame:
                self._bad(ev.code)
            elif kind is KillByte:
                self._bad("kill_byte")  # only a host sends it
        if rows:
            self._store(rows)
        return replies

    def _board_time(self, time_us: int, now: float) -> float:
        step = self._board_clock.update(time_us)
        if step.went_back:
            self._on_reset(now, "board clock went back")
            step = self._board_clock.update(time_us)
        self._clock_map.update(step.seconds, now)
        return step.seconds

    def _telemetry(self, ev: Telemetry, now: float):
        step = self._counter.update(ev.frame)
        if step.went_back:
            self._on_reset(now, "frame counter went back")
            step = self._counter.update(ev.frame)
        board_s = self._board_time(ev.time_us, now)
        if step.repeated:
            self.c["repeated"] += 1
            return None
        self.c["lost_frames"] += step.gap
        if self._nsig is None:
            self.c["unplaced_rows"] += 1  # before discovery: columns unknown
            return None
        if len(ev.values) != self._nsig:
            self._bad("width")
            return None
        return (0.0, board_s, float(step.total), *ev.values)

    def _store(self, rows: list) -> None:
        data = np.array(rows, dtype=float)
        if data.shape[1] != self.ring.width:  # the layout changed under this chunk
            self.c["unplaced_rows"] += len(rows)
            return
        # host time from board time: the link's jitter does not enter the time axis
        data[:, 0] = data[:, 1] + (self._clock_map.offset_s or 0.0)
        self.ring.append(data)
        self.c["tm_rows"] += len(rows)

    def _status(self, ev: Status, now: float) -> None:
        board_s = self._board_time(ev.time_us, now)
        try:
            st = BoardStatus.from_fields(ev.fields, board_time_s=board_s,
                                         host_time_s=self.host_time(board_s))
        except RemoteProtocolError as exc:
            self._bad(exc.code)
            return
        self.last_status = st
        self.motor_state = st.motor
        if st.motor in ("off", "tripped"):
            self.stop_reports += 1
        self.statuses.append(st)

    def _event(self, ev: Event, now: float) -> None:
        if ev.kind == "boot":
            self._on_reset(now, "board restarted")
        board_s = self._board_time(ev.time_us, now)
        self.events.append(LinkEvent(self.host_time(board_s), board_s, "board", ev.kind,
                                     dict(ev.fields)))
        if ev.kind == "trip":
            self.motor_state = "tripped"
            self.stop_reports += 1
        elif ev.kind == "clear" and self.motor_state == "tripped":
            self.motor_state = "off"
