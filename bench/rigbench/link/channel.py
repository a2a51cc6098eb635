"""The I/O channel under a Link: one reader thread, serialised writes, kill first,
heartbeat, request/reply matching, telemetry into a ring, counters.

Threads: the **reader** (started by ``start``) is the only thread that reads the port; it
feeds ``HostCodec``, files replies into waiting slots, telemetry into the ring, status and
events into logs, and sends the heartbeat in-band when it falls due (PROTOCOL.md §7.2), so
the heartbeat follows the link clock even when that clock is a simulated board's virtual
one. It runs no callbacks: other threads learn of news through ``threading.Condition``
wake-ups (every loop turn) and the ``reset_seen`` event. Any thread may write; writes take
one lock. All timing uses the port's clock (``clock.clock_of``).

Kill (PROTOCOL.md §7.1): ``write_kill`` marks a kill as pending, then takes the write lock
for at most ``kill_lock_wait_s``. A writer that gets the lock first sends the pending kill
bytes before its own frame, so nothing queued goes ahead of the kill. Frames are at most
200 bytes (≈ 17 ms at 115 200 baud), so the wait is short; if the lock is still held after
``kill_lock_wait_s`` (a write stuck on a full driver buffer) the kill bytes are written
without the lock: they may land inside that frame, which the board then discards, as the
protocol allows (the kill acts wherever the board's parser is).
"""

from __future__ import annotations

import logging
import statistics
import threading
from collections import deque

import serial

from rigbench.wire.codec import HostCodec
from rigbench.wire.messages import Err, Heartbeat, Ok

from rigbench.link.clock import clock_of, is_virtual
from rigbench.link.errors import BoardRefused, LinkError, LinkLost, LinkTimeout
from rigbench.link.ingest import Ingest
from rigbench.link.rawtap import RawTap
from rigbench.link.records import LinkEvent, LinkHealth
from rigbench.link.waits import Waits

log = logging.getLogger(__name__)


class _Slot:
    __slots__ = ("reply", "rx_time")

    def __init__(self) -> None:
        self.reply = None
        self.rx_time = 0.0


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


class Channel:
    """Port I/O for a Link. ``url`` names the port in messages."""

    def __init__(self, port, *, url: str = "", reply_timeout_s: float = 0.5,
                 heartbeat_s: float = 0.1, retries: int = 2, ring_rows: int = 65536,
                 stale_s: float = 1.0, read_chunk: int | None = None,
                 kill_lock_wait_s: float = 0.05, event_rows: int = 2000,
                 status_rows: int = 2000, virtual_stall_s: float = 30.0,
                 virtual_pace: str = "demand", raw_chunks: int = 4096) -> None:
        if virtual_pace not in ("demand", "free"):
            raise ValueError(f"virtual_pace must be 'demand' or 'free', not {virtual_pace!r}")
        self.port = port
        self.url = url or str(getattr(port, "port", "") or "port")
        self.clock = clock_of(port)
        self.virtual = is_virtual(self.clock)
        self.reply_timeout_s = reply_timeout_s
        self.heartbeat_s = heartbeat_s
        self.retries = retries
        self.stale_s = stale_s
        self.read_chunk = read_chunk  # fixed-size reads (socket:// cannot tell in_waiting)
        self.kill_lock_wait_s = kill_lock_wait_s
        # virtual clock: "demand" reads only while someone waits (waits.py); "free" always
        self.paced = self.virtual and virtual_pace == "demand"
        self.codec = HostCodec()
        self._hb_frame = self.codec.encode(Heartbeat())
        self._seq_lock = threading.Lock()
        self._wlock = threading.Lock()
        self._pending: dict[int, _Slot] = {}
        self._kill_pending = False
        self._kill_time: float | None = None
        self.ingest = Ingest(ring_rows=ring_rows, event_rows=event_rows,
                             status_rows=status_rows)
        self.waits = Waits(self.clock, virtual=self.virtual, paced=self.paced,
                           reset_seen=self.ingest.reset_seen, url=self.url,
                           virtual_stall_s=virtual_stall_s)
        self._cond = self.waits.cond  # replies are filed under the same condition
        self.events = self.ingest.events
        self.raw = RawTap(raw_chunks)  # whole lines of both directions, for a console
        self._thread: threading.Thread | None = None
        self._stop = False
        self._closed = False
        self._lost: str | None = None
        t = self.clock.now()
        self._last_rx: float | None = None
        self._next_hb = t
        self._hb_stopped = False   # a kill the board did not confirm stops it (killing.py)
        self.user_kills = 0        # kills not sent by an experiment's own guards
        # counters: requesters and the reader both count, under a small lock
        self.c = dict(timeouts=0, resends=0, late_replies=0, heartbeats=0, rx_bytes=0,
                      tx_bytes=0, confirmed=0)
        self._count_lock = threading.Lock()
        self._latency: deque = deque(maxlen=64)
        self._rates: deque = deque(maxlen=16)  # (t, rx_frames, tm_rows) samples

    # ------------------------------------------------------------------ life cycle

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name=f"link-reader {self.url}",
                                        daemon=True)
        self._thread.start()

    def close(self, *, join_s: float = 1.0) -> None:
        """Stop the reader and close the port. Safe to call twice."""
        if self._closed:
            return
        self._stop = True
        cancel = getattr(self.port, "cancel_read", None)
        if callable(cancel):
            try:
                cancel()
            except Exception as exc:  # noqa: BLE001 - a port that cannot cancel still closes
                log.debug("%s: cancel_read failed while closing: %r", self.url, exc)
        if self._thread is not None and self._thread is not threading.current_thread():
            self._thread.join(join_s)
        self._closed = True
        try:
            self.port.close()
        except Exception as exc:  # noqa: BLE001 - closing a vanished port may fail; it is gone
            log.debug("%s: closing the port failed: %r", self.url, exc)
        with self._cond:
            self._cond.notify_all()

    @property
    def stopped(self) -> bool:
        return self._stop

    @property
    def lost_reason(self) -> str | None:
        return self._lost

    def mark_lost(self, exc: BaseException) -> None:
        self._mark_lost(exc)

    def _mark_lost(self, exc: BaseException) -> None:
        if self._lost is None and not self._stop:
            self._lost = f"link to {self.url} lost: {_one_line(exc)}"
            self.events.append(LinkEvent(self.clock.now(), None, "link", "lost",
                                         {"reason": _one_line(exc)}))
        with self._cond:
            self._cond.notify_all()

    def check_usable(self) -> None:
        if self._lost:
            raise LinkLost(self._lost)
        if self._closed or self._stop:
            raise LinkError(f"link to {self.url} is closed")

    def count_confirmed(self) -> None:
        """A lost reply to ``arm``/``mode`` settled by asking ``status`` (Link._confirmed)."""
        self._count("confirmed")

    def _count(self, key: str, n: int = 1) -> None:
        with self._count_lock:
            self.c[key] += n

    # ------------------------------------------------------------------ writing

    def _raw_write(self, data: bytes) -> None:
        try:
            self.port.write(data)
        except serial.SerialTimeoutException as exc:
            raise LinkTimeout(f"write to {self.url} timed out: {_one_line(exc)}") from None
        except Exception as exc:  # noqa: BLE001 - any I/O failure means the port is gone
            self._mark_lost(exc)
            raise LinkLost(self._lost or f"link to {self.url} lost") from None
        self._count("tx_bytes", len(data))
        self.raw.record(self.clock.now(), ">", bytes(data))

    def write(self, data: bytes) -> float:
        """Write one frame (a pending kill goes first); return the link-clock time."""
        self.check_usable()
        with self._wlock:
            if self._kill_pending:
                self._raw_write(self.codec.kill_bytes())
                self._kill_pending = False
                self._kill_time = self.clock.now()
            self._raw_write(data)
            return self.clock.now()

    def stop_heartbeat(self) -> None:
        """Send no more heartbeats: the board's watchdog trips the motor (PROTOCOL.md §7.2)."""
        self._hb_stopped = True
        self.events.append(LinkEvent(self.clock.now(), None, "link", "heartbeat_stopped", {}))

    def resume_heartbeat(self) -> None:
        self._hb_stopped = False

    @property
    def heartbeat_stopped(self) -> bool:
        return self._hb_stopped

    def write_kill(self, repeat: int = 3, *, reason: str = "user") -> float:
        """Write the kill byte ``repeat`` times ahead of anything queued; return the time.
        ``reason``: who asked (``user`` for a person or a signal; an experiment's guard
        names itself) — a sweep never re-arms after a user's kill."""
        if self._lost:
            raise LinkLost(self._lost)
        self._kill_pending = True
        got = self._wlock.acquire(timeout=self.kill_lock_wait_s)
        try:
            if self._kill_pending or not got:
                self._raw_write(self.codec.kill_bytes(repeat))
                self._kill_pending = False
                self._kill_time = self.clock.now()
        finally:
            if got:
                self._wlock.release()
        t = self._kill_time if self._kill_time is not None else self.clock.now()
        if reason == "user":
            self.user_kills += 1
        self.events.append(LinkEvent(t, None, "link", "kill",
                                     {"repeat": str(repeat), "by": reason}))
        return t

    # ------------------------------------------------------------------ waiting

    def wait_until(self, predicate, deadline: float) -> bool:
        """See Waits.wait_until (link-clock deadline). Raises LinkLost when the port goes."""
        return self.waits.wait_until(predicate, deadline, self.check_usable)

    def sleep(self, seconds: float) -> None:
        """Let ``seconds`` of link-clock time pass (virtual time too)."""
        self.wait_until(lambda: False, self.clock.now() + seconds)

    # ------------------------------------------------------------------ requests

    def request(self, cmd_cls, *args, timeout_s: float | None = None,
                retries: int | None = None, **kwargs) -> Ok:
        """Send a command and return its ``Ok`` reply (PROTOCOL.md §4).

        Only idempotent commands (``cmd_cls.IDEMPOTENT``) are resent after a timeout, with
        the same sequence number (§4.2). Raises BoardRefused on ``err``, LinkTimeout when
        no reply came in time, LinkLost when the port went away.
        """
        self.check_usable()
        timeout = self.reply_timeout_s if timeout_s is None else timeout_s
        tries = 1 + ((self.retries if retries is None else retries) if cmd_cls.IDEMPOTENT else 0)
        with self._seq_lock:
            msg, frame = self.codec.command(cmd_cls, *args, **kwargs)
        slot = _Slot()
        with self._cond:
            self._pending[msg.seq] = slot
        try:
            for attempt in range(tries):
                if attempt:
                    self._count("resends")
                t_sent = self.write(frame)
                if self.wait_until(lambda: slot.reply is not None, t_sent + timeout):
                    break
                self._count("timeouts")
            else:
                hint = "" if cmd_cls.IDEMPOTENT else " (not resent: ask `status`)"
                raise LinkTimeout(f"no reply from {self.url} to {cmd_cls.VERB!r} within "
                                  f"{timeout:g} s after {tries} tries{hint}")
        finally:
            with self._cond:
                self._pending.pop(msg.seq, None)
        self._latency.append(max(slot.rx_time - t_sent, 0.0))
        if isinstance(slot.reply, Err):
            raise BoardRefused(slot.reply.code, slot.reply.text, cmd_cls.VERB)
        return slot.reply

    # ------------------------------------------------------------------ reader

    def _read_chunk(self) -> bytes:
        if self.read_chunk:
            return self.port.read(self.read_chunk)
        n = self.port.in_waiting
        return self.port.read(n if n > 0 else 1)

    def _run(self) -> None:
        try:
            while not self._stop:
                if self.waits.idle():
                    continue
                now = self.clock.now()
                if now >= self._next_hb and not self._hb_stopped:
                    self.write(self._hb_frame)
                    self.c["heartbeats"] += 1
                    self._next_hb = max(self._next_hb + self.heartbeat_s, now)
                data = self._read_chunk()
                now = self.clock.now()
                if data:
                    self._last_rx = now
                    self.c["rx_bytes"] += len(data)
                    self.raw.record(now, "<", data)
                    for reply in self.ingest.handle(self.codec.receive(data), now):
                        self._match(reply, now)
                if not self._rates or now - self._rates[-1][0] >= 0.25:
                    ic = self.ingest.c
                    self._rates.append((now, ic["rx_frames"], ic["tm_rows"]))
                self.waits.settle(now)
        except Exception as exc:  # noqa: BLE001 - unplug shows up as many exception types
            # (a failed heartbeat write has already marked the link lost; a stuck write
            # that timed out ends here too: a port that cannot take 10 bytes is gone)
            if not self._stop:
                self._mark_lost(exc)

    def _match(self, reply, now: float) -> None:
        with self._cond:
            slot = self._pending.get(reply.seq)
            if slot is None or slot.reply is not None:
                self.c["late_replies"] += 1
                return
            slot.rx_time = now
            slot.reply = reply

    # ------------------------------------------------------------------ health

    def state(self) -> str:
        if self._lost:
            return "lost"
        if self._closed:
            return "closed"
        if self.ingest.handshake_needed:
            return "reset"
        now = self.clock.now()
        if self._last_rx is None or now - self._last_rx > self.stale_s:
            return "stale"
        return "ok"

    def health(self) -> LinkHealth:
        now = self.clock.now()
        c = {**self.c, **self.ingest.c}
        bad = dict(self.ingest.bad_frames)
        rates = list(self._rates)
        fps = tps = 0.0
        if len(rates) >= 2:
            window = [r for r in rates if now - r[0] <= 2.5] or rates[-2:]
            t0, f0, r0 = window[0] if len(window) > 1 else rates[-2]
            t1, f1, r1 = rates[-1]
            if t1 > t0:
                fps, tps = (f1 - f0) / (t1 - t0), (r1 - r0) / (t1 - t0)
        lat = list(self._latency)
        st = self.ingest.last_status
        return LinkHealth(
            state=self.state(), frames_per_s=fps, telemetry_per_s=tps,
            rx_frames=c["rx_frames"], bad_frames=bad,
            crc_errors=bad.get("crc", 0), lost_frames=c["lost_frames"],
            board_drops=st.drops if st else 0, board_rx_errors=st.rx_err if st else 0,
            reply_latency_s=lat[-1] if lat else None,
            reply_latency_median_s=statistics.median(lat) if lat else None,
            since_rx_s=None if self._last_rx is None else now - self._last_rx,
            resets=c["resets"], resyncs=c["resyncs"], timeouts=c["timeouts"],
            resends=c["resends"], late_replies=c["late_replies"], heartbeats=c["heartbeats"],
            rx_bytes=c["rx_bytes"], tx_bytes=c["tx_bytes"], lost_reason=self._lost,
            confirmed_by_status=c["confirmed"],
        )

