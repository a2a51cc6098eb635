"""What the link reports: board status, events, link health, save results (dataclasses).

Values are SI inside Python: times in seconds (``heartbeat_age_s`` from the board's
``hb_ms``). Board time is the unwrapped board clock in seconds; host time is the link
clock in seconds (see timebase.ClockMap).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.messages import parse_number

LINK_STATES = ("ok", "stale", "reset", "lost", "closed")


def _opt(value: str | None, none_words=("none", "-")) -> str | None:
    return None if value is None or value in none_words else value


def _count(fields: dict, key: str) -> int:
    text = fields.get(key)
    if text is None:
        return 0
    value = parse_number(text, key)
    if value < 0 or value != int(value):
        raise RemoteProtocolError("bad_number", f"{key}={text} is not a count")
    return int(value)


@dataclass(frozen=True)
class BoardStatus:
    """A status frame ``st`` or the reply to ``status`` (PROTOCOL.md §6.2)."""

    mode: str
    loop: str | None
    motor: str  # off | armed | running | tripped
    fault: str | None  # latched fault cause, None when none
    why: tuple[str, ...]  # interlock conditions that would refuse ``arm`` now
    drops: int  # telemetry frames the board dropped (its count)
    rx_err: int  # frames the board could not read (its count)
    heartbeat_age_s: float  # time since the board last saw a heartbeat
    board_time_s: float | None  # unwrapped board time of the frame (None in a reply)
    host_time_s: float  # link-clock time the status refers to

    @classmethod
    def from_fields(cls, items, *, board_time_s: float | None, host_time_s: float) -> "BoardStatus":
        """Parse status fields; unknown keys are ignored (newer minor versions may add some)."""
        f = dict(items)
        for key in ("mode", "motor"):
            if key not in f:
                raise RemoteProtocolError("bad_field", f"status lacks {key}=")
        why = _opt(f.get("why"))
        hb_ms = parse_number(f["hb_ms"], "hb_ms") if "hb_ms" in f else float("nan")
        return cls(
            mode=f["mode"], loop=_opt(f.get("loop")), motor=f["motor"],
            fault=_opt(f.get("fault")), why=tuple(why.split(",")) if why else (),
            drops=_count(f, "drops"), rx_err=_count(f, "rx_err"),
            heartbeat_age_s=hb_ms * 1e-3, board_time_s=board_time_s, host_time_s=host_time_s,
        )


@dataclass(frozen=True)
class LinkEvent:
    """A board event (``ev``, PROTOCOL.md §6.3) or a link happening (source ``link``).

    Link kinds: ``handshake`` (discovery done), ``reset`` (board restart seen), ``lost``
    (port gone), ``kill`` (host sent the kill byte), ``resync`` (re-handshake done).
    """

    host_time_s: float
    board_time_s: float | None
    source: str  # "board" | "link"
    kind: str
    fields: dict = field(default_factory=dict)

    def get(self, key: str, default=None):
        return self.fields.get(key, default)


@dataclass(frozen=True)
class RawLine:
    """One line that crossed the link, for a console: ``>`` to the board, ``<`` from it.

    Whole lines, however the port cut them into chunks (rawtap.py). ``cut``: the line was
    longer than the tap keeps (200 bytes), or a kill byte ended it unfinished; its text
    is what was kept. Non-printable bytes (the kill byte) appear as ``\\x18``.
    """

    host_time_s: float
    direction: str
    text: str
    cut: bool = False

    def __str__(self) -> str:
        mark = " …[cut]" if self.cut else ""
        return f"{self.host_time_s:10.3f} {self.direction} {self.text}{mark}"


@dataclass(frozen=True)
class LinkHealth:
    """Counters and figures of the link at one moment (link-clock seconds)."""

    state: str  # one of LINK_STATES
    frames_per_s: float  # good frames received per second, recent window
    telemetry_per_s: float  # telemetry rows per second, recent window
    rx_frames: int  # good frames received
    bad_frames: dict  # code -> count of received lines the codec rejected
    crc_errors: int
    lost_frames: int  # telemetry frames missing from counter gaps (board drops included)
    board_drops: int  # telemetry frames the board says it dropped (last status)
    board_rx_errors: int  # frames the board could not read (last status)
    reply_latency_s: float | None  # last request → reply time
    reply_latency_median_s: float | None  # median of the recent replies
    since_rx_s: float | None  # time since the last byte arrived
    resets: int  # board restarts seen
    resyncs: int  # successful re-handshakes after a restart
    timeouts: int  # requests that got no reply in time (each attempt)
    resends: int
    late_replies: int  # replies that came after their request gave up
    heartbeats: int
    rx_bytes: int
    tx_bytes: int
    lost_reason: str | None = None
    confirmed_by_status: int = 0  # lost replies to arm/mode settled by asking status

    @property
    def line_error_rate(self) -> float:
        """Fraction of received lines the codec refused (CRC, junk, truncated…): 0 on a
        clean line; kill bytes (sent only by a host) do not count."""
        bad = sum(v for k, v in self.bad_frames.items() if k != "kill_byte")
        total = bad + self.rx_frames
        return bad / total if total else 0.0


@dataclass(frozen=True)
class SaveResult:
    """Reply to ``save`` and its check (PROTOCOL.md §5.5)."""

    count: int  # parameters stored, as the board says
    crc: int  # CRC-16 the board reports for the stored image
    host_crc: int  # CRC-16 of the image built from the values read back
    expected_count: int  # writable parameters the board declared

    @property
    def verified(self) -> bool:
        return self.crc == self.host_crc and self.count == self.expected_count
