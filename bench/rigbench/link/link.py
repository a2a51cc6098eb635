"""``Link``: a connection to one board over any pyserial URL, with handshake, discovery,
requests, telemetry, status, events, kill and health.

Open with ``Link.open(url)`` (a device path, any pyserial URL, or ``sim://...``) or attach
to a port object already open with ``Link.attach(port)``. On open the link starts its
reader (channel.py), handshakes (PROTOCOL.md §5: ``hello`` then ``param``/``signal``/``loop``
by index) and refuses a board with another major version. After a board restart it
handshakes again from its own resync thread (never from the reader, which must keep
reading for the replies to arrive), re-applies the last stream rate, and counts it.

Every time is link-clock seconds (the port's own clock for a simulated board, else
monotonic time). Wait with ``link.sleep``/``link.wait_until`` (or the port clock's own
``sleep``), never ``time.sleep``: with a virtual clock, simulated time moves only while
someone waits on the link (waits.py), so a run driven from one thread is repeatable.
Values are the board's declared units; convert with rigbench.base.units.
"""

from __future__ import annotations

import logging
import threading
from dataclasses import replace

import serial

from rigbench.link.urls import register_url_handlers

from rigbench.wire.crc import crc16
from rigbench.wire.describe import BoardInfo, LoopInfo, ParamInfo, SignalInfo, compatible
from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.limits import (
    DeclarationError, check_hello, check_loops, check_params, check_signals, set_lines,
)
from rigbench.wire.messages import (
    PROTOCOL_VERSION, Arm, Clear, DescribeLoop, DescribeParam, DescribeSignal, Disarm, Get,
    Hello, Kill, Mode, Ok, Restore, Save, Set, Stage, StatusRequest, Stream, parse_number,
)

from rigbench.link.channel import Channel
from rigbench.link.killing import CONFIRM_S, kill_and_confirm
from rigbench.link.killsock import KillService
from rigbench.link.errors import (
    BoardDeclarationRefused, BoardRefused, IncompatibleBoard, LinkError, LinkLost, LinkTimeout,
    SaveMismatch, open_error,
)
from rigbench.link.records import BoardStatus, LinkEvent, LinkHealth, RawLine, SaveResult
from rigbench.link.ring import TelemetryBlock

log = logging.getLogger(__name__)

_FIXED_CHUNK_SCHEMES = ("socket://", "rfc2217://")  # in_waiting says only 0 or 1
_REPLY_BUDGET = 150  # bytes of reply body we plan for per ``get`` (frame body max 193)
# Defaults of every command (docs/FAULTS.md measures the noisy-line rows with them): a board
# replies within 50 ms (PROTOCOL.md §4.2), a USB bridge adds ≈ 16 ms; 0.25 s leaves room.
# 10 resends of an idempotent command ride through a line that damages one frame in two.
REPLY_TIMEOUT_S = 0.25
RETRIES = 10
# ``arm`` and ``mode`` are never resent; after a lost reply the host asks ``status`` and, if
# the command did not take effect, sends it again as a new command, at most this many times
CONFIRM_TRIES = 6


def _value(text: str):
    """A reply field as a number when it is one, else the word."""
    try:
        return parse_number(text)
    except RemoteProtocolError:
        return text


class Link:
    """One board on one port. See the module docstring; use as a context manager."""

    def __init__(self, port, *, url: str | None = None, reply_timeout_s: float = REPLY_TIMEOUT_S,
                 heartbeat_s: float = 0.1, ring_rows: int = 65536, retries: int = RETRIES,
                 handshake_timeout_s: float = 3.0, stale_s: float = 1.0,
                 read_chunk: int | None = None, virtual_pace: str = "demand") -> None:
        self.url = url or str(getattr(port, "port", None) or "port")
        if read_chunk is None and self.url.startswith(_FIXED_CHUNK_SCHEMES):
            read_chunk = 4096
        self.channel = Channel(port, url=self.url, reply_timeout_s=reply_timeout_s,
                               heartbeat_s=heartbeat_s, retries=retries, ring_rows=ring_rows,
                               stale_s=stale_s, read_chunk=read_chunk,
                               virtual_pace=virtual_pace)
        self.port = port
        self.clock = self.channel.clock
        self.handshake_timeout_s = handshake_timeout_s
        self.info: BoardInfo | None = None
        self.params: dict[str, ParamInfo] = {}
        self.signals: list[SignalInfo] = []
        self.loops: dict[str, LoopInfo] = {}
        self._stream_rate_hz: float | None = None
        self._resync_thread: threading.Thread | None = None
        self._kill_service: KillService | None = None
        self.on_close = None  # called with the link once, when it closes (a command's report)

    # ------------------------------------------------------------------ opening

    @classmethod
    def open(cls, url: str, *, reply_timeout_s: float = REPLY_TIMEOUT_S, heartbeat_s: float = 0.1,
             ring_rows: int = 65536, baudrate: int = 115200, read_timeout_s: float = 0.01,
             write_timeout_s: float = 1.0, **kwargs) -> "Link":
        """Open ``url`` and handshake. Raises LinkError (one line, with a likely fix)."""
        options = dict(timeout=read_timeout_s, baudrate=baudrate, write_timeout=write_timeout_s)
        if "://" not in url:
            options["exclusive"] = True  # a second program on a device port is an error
        register_url_handlers()
        try:
            port = serial.serial_for_url(url, **options)
        except (OSError, ValueError) as exc:
            raise open_error(url, exc) from None
        link = cls.attach(port, url=url, reply_timeout_s=reply_timeout_s,
                          heartbeat_s=heartbeat_s, ring_rows=ring_rows, **kwargs)
        if "://" not in url:
            # `rigbench kill` in another terminal reaches this program's link (killsock.py)
            link._kill_service = KillService(link, url).start()
        return link

    @classmethod
    def attach(cls, port, *, kill_first: bool = False, **kwargs) -> "Link":
        """Wrap an open pyserial-like port object, start and handshake. ``kill_first``
        sends the kill bytes before anything else (``rigbench kill``)."""
        link = cls(port, **kwargs)
        try:
            link.start(kill_first=kill_first)
        except BaseException:
            link.close()
            raise
        return link

    def start(self, *, kill_first: bool = False) -> None:
        if kill_first:
            self.channel.write_kill()
        self.channel.start()
        self._handshake(resync=False, hello_timeout_s=self.handshake_timeout_s)
        self._resync_thread = threading.Thread(target=self._resync_loop, daemon=True,
                                               name=f"link-resync {self.url}")
        self._resync_thread.start()

    def close(self) -> None:
        """Stop the threads promptly and close the port. Safe to call twice."""
        if self._kill_service is not None:
            self._kill_service.close()
        hook, self.on_close = self.on_close, None
        if callable(hook):
            try:
                hook(self)
            except Exception:  # noqa: BLE001 - a report must not keep the port open
                pass
        self.channel.close()
        self.channel.ingest.reset_seen.set()  # wakes the resync thread, which sees the stop
        if self._resync_thread is not None and self._resync_thread is not threading.current_thread():
            self._resync_thread.join(1.0)

    def __enter__(self) -> "Link":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ handshake

    def _handshake(self, *, resync: bool, hello_timeout_s: float) -> None:
        ch = self.channel
        tries = max(1, int(round(hello_timeout_s / ch.reply_timeout_s)))
        try:
            try:
                reply = ch.request(Hello, retries=tries - 1)
            except BoardRefused as exc:
                if exc.code != "state":
                    raise
                # a board following the older §4.2 took our hello for a resend of a previous
                # host's (same number, same bytes, a trip since): a new number is a new command
                reply = ch.request(Hello, retries=tries - 1)
        except LinkTimeout:
            baud = getattr(self.port, "baudrate", None)
            at = f" at {baud} baud" if baud and not self.url.startswith("sim://") else ""
            raise LinkTimeout(f"no answer from {self.url} to hello within {hello_timeout_s:g} s:"
                              f" is a board speaking this protocol on the port{at}, powered,"
                              " and out of its bootloader?") from None
        except BoardRefused as exc:
            if exc.code == "version":
                raise IncompatibleBoard(
                    f"board at {self.url} refused protocol {'%d.%d' % PROTOCOL_VERSION}:"
                    " its firmware speaks another major version") from None
            raise
        try:
            info = BoardInfo.from_fields(reply.fields)
            if not compatible(info.version):
                raise IncompatibleBoard(
                    f"board at {self.url} speaks protocol {'%d.%d' % info.version}, rigbench"
                    f" speaks {'%d.%d' % PROTOCOL_VERSION}: update one of them")
            check_hello(info)  # counts first: nothing is asked or kept per declared item before
            plist = [ParamInfo.from_fields(ch.request(DescribeParam, i).fields)
                     for i in range(info.params)]
            check_params(plist)
            signals = [SignalInfo.from_fields(ch.request(DescribeSignal, i).fields)
                       for i in range(info.signals)]
            check_signals(signals)
            llist = [LoopInfo.from_fields(ch.request(DescribeLoop, i).fields)
                     for i in range(info.loops)]
            check_loops(llist)
            params = {p.name: p for p in plist}
            loops = {lp.name: lp for lp in llist}
        except DeclarationError as exc:
            raise BoardDeclarationRefused(
                f"board at {self.url} declares what rigbench refuses (PROTOCOL.md §5.6):"
                f" {exc.detail}") from None
        except RemoteProtocolError as exc:
            raise LinkError(f"board at {self.url} sent a bad discovery reply: {exc}") from None
        ch.ingest.set_layout([s.name for s in signals], [s.unit for s in signals])
        self.info, self.params, self.signals, self.loops = info, params, signals, loops
        ch.ingest.handshake_done(self.clock.now(), resync=resync)
        if resync and self._stream_rate_hz:
            self.stream(self._stream_rate_hz)
        ch.events.append(LinkEvent(self.clock.now(), None, "link", "handshake",
                                   {"board": info.board, "fw": info.firmware, "rig": info.rig}))

    def _resync_loop(self) -> None:
        ch = self.channel
        ch.waits.resync_ident = threading.get_ident()
        while not (ch.lost_reason or ch.stopped):
            if not ch.ingest.reset_seen.wait(0.5) or ch.stopped:
                continue
            try:
                self._handshake(resync=True, hello_timeout_s=self.handshake_timeout_s)
            except LinkLost:
                return
            except (IncompatibleBoard, BoardDeclarationRefused) as exc:
                log.warning("%s: board restarted as one we cannot talk to: %s", self.url, exc)
                ch.mark_lost(exc)  # a board we cannot talk to is as good as gone
                return
            except (LinkError, BoardRefused) as exc:
                # a board still booting: try again while the flag is up
                log.debug("%s: handshake after a restart failed, retrying: %s", self.url, exc)
                continue
            finally:
                ch.waits.update_demand()

    # ------------------------------------------------------------------ requests

    def request(self, cmd_cls, *args, timeout_s: float | None = None, **kwargs) -> Ok:
        """Send ``cmd_cls(seq, *args, **kwargs)``; return the Ok reply (see Channel.request)."""
        return self.channel.request(cmd_cls, *args, timeout_s=timeout_s, **kwargs)

    def _get_raw(self, names) -> dict[str, str]:
        """``get`` in as many frames as the body length needs; values as the board wrote them.
        Each name is asked once (a board refuses a ``get`` naming one twice, PROTOCOL.md §5.5)."""
        batches: list[list[str]] = []
        size = 0
        for name in dict.fromkeys(names):
            cost = len(name) + 17  # " name=" and a value of up to 15 characters
            if not batches or size + cost > _REPLY_BUDGET:
                batches.append([])
                size = 0
            batches[-1].append(name)
            size += cost
        out: dict[str, str] = {}
        for batch in batches:
            out.update(self.request(Get, tuple(batch)).fields)
        return out

    def get(self, *names: str) -> dict[str, float]:
        """Current values of the named parameters (board units)."""
        return {k: _value(v) for k, v in self._get_raw(names).items()}

    def set(self, **values: float) -> dict[str, float]:
        """Set parameters atomically (PROTOCOL.md §5.5); return what was applied. A group
        longer than one line goes as ``stage`` lines then one ``set`` that applies them all;
        if any of them fails, nothing was applied and the staged part is dropped."""
        lines = set_lines(tuple((k, float(v)) for k, v in values.items()))
        try:
            for line in lines[:-1]:
                self.request(Stage, tuple(line))
            reply = self.request(Set, tuple(lines[-1]))
        except BaseException:
            if len(lines) > 1:
                self._drop_staged()
            raise
        applied = {k: _value(v) for k, v in reply.fields}
        if len(lines) > 1:  # the staged values as the board applied them
            applied = {**self.get(*(k for line in lines[:-1] for k, _ in line)), **applied}
        params = dict(self.params)
        for k, v in applied.items():
            if k in params and isinstance(v, float):
                params[k] = replace(params[k], value=v)
        self.params = params
        return applied

    def _confirmed(self, cmd_cls, args: tuple, took_effect):
        """Send a command that is never resent (``arm``, ``mode``: PROTOCOL.md §4.2). When its
        reply is lost, ask ``status``: if ``took_effect(status, events since sending)`` the
        command is done (returns None); else send it again as a new command (a new sequence
        number). Returns the Ok reply when one arrived."""
        for _ in range(CONFIRM_TRIES):
            cursor = self.event_cursor()
            try:
                return self.request(cmd_cls, *args)
            except LinkTimeout:
                pass
            st = self.status()  # idempotent: resent as often as the line needs
            _, events = self.events_since(cursor)
            self.channel.count_confirmed()
            if took_effect(st, [e for e in events if e.source == "board"]):
                return None
        raise LinkTimeout(f"no reply from {self.url} to {cmd_cls.VERB!r}, and `status` did not "
                          f"show it done after {CONFIRM_TRIES} tries: the line loses too much")

    def _drop_staged(self) -> None:
        """A group that failed half-way: any command but ``stage``/``set`` drops what the
        board staged (§5.5), so a later ``set`` cannot apply it."""
        try:
            self.request(StatusRequest)
        except (LinkError, BoardRefused):
            pass  # a board that cannot answer drops the group when it restarts

    def arm(self) -> str:
        reply = self._confirmed(Arm, (), lambda st, ev: st.motor in ("armed", "running"))
        return "armed" if reply is None else reply.get("motor", "armed")

    def disarm(self) -> str:
        return self.request(Disarm).get("motor", "off")

    def clear(self) -> str:
        return self.request(Clear).get("motor", "off")

    def mode(self, name: str, **args) -> dict:
        """Change mode (PROTOCOL.md §8); returns the fields the board applied."""
        loop = args.get("loop")

        def took_effect(st, events) -> bool:
            if st.mode == name and (loop is None or st.loop == loop):
                return True
            # a timed mode may have ended before the status: its ``ev mode``/``ev done`` tells
            return any(e.kind in ("mode", "done") and e.get("mode") == name
                       and (loop is None or e.get("loop") in (loop, None)) for e in events)

        reply = self._confirmed(Mode, (name, tuple(args.items())), took_effect)
        if reply is None:  # done, as status showed: the values asked for (not the board's)
            return {"mode": name, **args}
        return {k: _value(v) for k, v in reply.fields}

    def stream(self, rate_hz: float) -> float:
        """Ask for telemetry at ``rate_hz`` (0 stops); returns the rate the board chose."""
        actual = float(parse_number(self.request(Stream, float(rate_hz)).get("rate_hz", "0")))
        self._stream_rate_hz = actual
        return actual

    def save(self, *, verify: bool = True) -> SaveResult:
        """Store the parameters on the board and check the stored image's CRC (§5.5)."""
        reply = self.request(Save)
        writable = [p.name for p in self.params.values() if p.writable]
        values = self._get_raw(writable)
        image = " ".join(f"{name}={values[name]}" for name in writable)
        result = SaveResult(int(parse_number(reply.get("count", "0"))),
                            int(reply.get("crc", "0"), 16), crc16(image.encode("ascii")),
                            len(writable))
        if verify and not result.verified:
            raise SaveMismatch(f"board at {self.url} stored count={result.count} crc="
                               f"{result.crc:04X}, values read back give count="
                               f"{result.expected_count} crc={result.host_crc:04X}", result)
        return result

    def restore(self) -> int:
        """Load the board's stored parameters into the live ones; refresh ``params``."""
        count = int(parse_number(self.request(Restore).get("count", "0")))
        self.refresh_params()
        return count

    def refresh_params(self) -> dict[str, ParamInfo]:
        values = self.get(*self.params)
        self.params = {n: replace(p, value=values.get(n, p.value)) for n, p in self.params.items()}
        return self.params

    def status(self) -> BoardStatus:
        reply = self.request(StatusRequest)
        try:
            return BoardStatus.from_fields(reply.fields, board_time_s=None,
                                           host_time_s=self.clock.now())
        except RemoteProtocolError as exc:
            raise LinkError(f"board at {self.url} sent a bad status reply: {exc}") from None

    def kill(self, *, framed: bool = False, repeat: int = 3, reason: str = "user") -> float:
        """Kill byte ×``repeat`` ahead of anything queued (PROTOCOL.md §7.1); returns the
        link-clock time it was written. ``framed`` also sends ``kill`` and awaits its reply.
        ``reason``: ``user`` (a person, a signal) or the experiment guard that sent it."""
        t = self.channel.write_kill(repeat, reason=reason)
        if framed:
            self.request(Kill)
        return t

    def kill_confirmed(self, *, reason: str = "user", confirm_s: float | None = None):
        """Kill and wait for the board to confirm; escalate when it does not (killing.py).
        Returns a KillOutcome."""
        return kill_and_confirm(self, reason=reason,
                                confirm_s=CONFIRM_S if confirm_s is None else confirm_s)

    # ------------------------------------------------------------------ observing

    def now(self) -> float:
        return self.clock.now()

    def sleep(self, seconds: float) -> None:
        """Let ``seconds`` of link time pass (simulated time too). Raises LinkLost."""
        self.channel.sleep(seconds)

    def wait_until(self, predicate, timeout_s: float) -> bool:
        """Wait (link time) until ``predicate()`` holds; keep it cheap and lock-free."""
        return self.channel.wait_until(predicate, self.clock.now() + timeout_s)

    def telemetry_cursor(self) -> int:
        return self.channel.ingest.ring.cursor()

    def read_since(self, cursor: int) -> tuple[int, TelemetryBlock]:
        return self.channel.ingest.ring.read_since(cursor)

    def snapshot(self, seconds: float | None = None, rows: int | None = None) -> TelemetryBlock:
        return self.channel.ingest.ring.snapshot(seconds=seconds, rows=rows)

    def event_cursor(self) -> int:
        return self.channel.events.cursor()

    def events_since(self, cursor: int) -> tuple[int, list]:
        return self.channel.events.since(cursor)

    def status_cursor(self) -> int:
        return self.channel.ingest.statuses.cursor()

    def statuses_since(self, cursor: int) -> tuple[int, list]:
        return self.channel.ingest.statuses.since(cursor)

    def raw_cursor(self) -> int:
        return self.channel.raw.cursor()

    def raw_since(self, cursor: int) -> tuple[int, list[RawLine]]:
        """Whole lines that crossed the link since ``cursor``, both directions, heartbeats
        and telemetry included (rawtap.py); a line still arriving waits for its end."""
        return self.channel.raw.since(cursor)

    @property
    def last_status(self) -> BoardStatus | None:
        return self.channel.ingest.last_status

    @property
    def user_kills(self) -> int:
        """Kills sent for a person (a key, a signal, `rigbench kill`), not by a guard."""
        return self.channel.user_kills

    @property
    def motor_state(self) -> str | None:
        return self.channel.ingest.motor_state

    @property
    def state(self) -> str:
        return self.channel.state()

    @property
    def simulated(self) -> bool:
        return bool(self.info and self.info.simulated)

    def health(self) -> LinkHealth:
        return self.channel.health()

    def line_report(self) -> str | None:
        """One line on how noisy the link was, or None when nothing was lost or resent."""
        h = self.health()
        if not (h.line_error_rate or h.resends or h.timeouts or h.confirmed_by_status):
            return None
        bad = ", ".join(f"{k} {v}" for k, v in sorted(h.bad_frames.items()) if k != "kill_byte")
        return (f"link {self.url}: {h.line_error_rate:.2%} of received lines refused"
                + (f" ({bad})" if bad else "") + f"; {h.resends} resends, "
                f"{h.confirmed_by_status} lost replies settled by asking status")

