"""A board that misbehaves on purpose: huge declarations, bad names and units, a flood of
blank lines or events, values that are not numbers. Each case ends with a clear refusal or
a working session, within seconds, with the host's memory bounded (PROTOCOL.md §5.6)."""

import resource
import time

import pytest
from fake_board import FakeBoard, FakePort, SIGNALS

from rigbench.link import Link
from rigbench.link.errors import BoardDeclarationRefused
from rigbench.recordings.recording import Recorder, load_recording
from rigbench.wire.codec import BoardCodec
from rigbench.wire.crc import crc16
from rigbench.wire.limits import DeclarationError, check_hello
from rigbench.wire.describe import BoardInfo, SignalInfo
from rigbench.wire.messages import DescribeSignal, Event, Hello, Ok

MB = 1 << 20


def _rss_bytes() -> int:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * resource.getpagesize()


class Hostile(FakeBoard):
    """A FakeBoard whose ``hello`` and ``signal`` replies can be replaced."""

    def __init__(self, *, hello: dict | None = None, signals=None, **kw) -> None:
        super().__init__(**kw)
        self.hello_fields = hello or {}
        self.signal_table = signals

    def _act(self, msg, t):
        if isinstance(msg, Hello):
            reply = super()._act(msg, t)
            fields = dict(reply.fields)
            fields.update({k: str(v) for k, v in self.hello_fields.items()})
            if self.signal_table is not None:
                fields.setdefault("signals", str(len(self.signal_table)))
            return Ok(msg.seq, tuple(fields.items()))
        if isinstance(msg, DescribeSignal) and self.signal_table is not None:
            if msg.index >= len(self.signal_table):
                return super()._act(msg, t)
            return Ok(msg.seq, tuple(self.signal_table[msg.index].to_fields()))
        return super()._act(msg, t)


def _open(board) -> Link:
    return Link.attach(FakePort(board), url="fake://hostile")


@pytest.mark.parametrize("hello, words", [
    ({"signals": 70000}, "signals=70000 is more than 64"),
    ({"params": 1000000}, "params=1000000 is more than 256"),
    ({"loops": 5000}, "loops=5000 is more than 16"),
    ({"rate_hz": 0}, "rate_hz=0 is outside"),
    ({"watchdog_ms": 0}, "watchdog_ms=0 is outside"),
    ({"watchdog_ms": 1e9}, r"watchdog_ms=1e\+09 is outside"),
])
def test_huge_or_absurd_counts_are_refused_before_anything_is_asked(hello, words, thread_errors):
    board = Hostile(hello=hello)
    before = _rss_bytes()
    t0 = time.monotonic()
    with pytest.raises(BoardDeclarationRefused, match=words) as err:
        _open(board)
    assert time.monotonic() - t0 < 10
    assert "fake://hostile" in str(err.value) and "§5.6" in str(err.value)
    asked = [type(m).__name__ for _, m in board.received if hasattr(m, "seq")]
    assert asked == ["Hello"]  # nothing asked per declared item
    assert _rss_bytes() - before < 50 * MB


@pytest.mark.parametrize("signal, words", [
    (SignalInfo(1, "a,b", "deg"), "is not a name"),
    (SignalInfo(1, "Tilt", "deg"), "is not a name"),
    (SignalInfo(1, "wheel", "deg,x"), "is not a unit"),
    (SignalInfo(1, "tilt", "deg"), "declared twice"),
    (SignalInfo(1, "frame", "1"), "reserves"),
    (SignalInfo(0, "wheel", "rev/s"), "says index=0"),
])
def test_signal_names_and_units_follow_the_recording_header_rule(signal, words, thread_errors):
    table = [SIGNALS[0], signal, SIGNALS[2]]
    with pytest.raises(BoardDeclarationRefused, match=words):
        _open(Hostile(signals=table))


def test_a_good_declaration_still_opens_and_records(tmp_path, thread_errors):
    link = _open(Hostile())
    try:
        assert [s.name for s in link.signals] == ["tilt", "wheel", "out"]
    finally:
        link.close()


def _flood(board, payload: bytes, every_s: float):
    """Schedule ``payload`` into the board's output every ``every_s`` seconds, forever."""
    def push(b, t):
        b.out += payload
        b.schedule.append((t + every_s, push))
    board.schedule.append((0.0, push))


def test_a_board_sending_blank_lines_keeps_memory_bounded(thread_errors):
    board = Hostile()
    _flood(board, b"\n" * 20000, 0.002)  # 10 MB/s of LF, on top of the protocol
    link = _open(board)
    try:
        before = _rss_bytes()
        t0 = time.monotonic()
        link.stream(100)
        while time.monotonic() - t0 < 3.0:
            link.sleep(0.5)
        assert link.status().motor == "off"  # the session still works
        tap = link.channel.raw
        assert tap.blank_lines > 1_000_000
        assert _rss_bytes() - before < 100 * MB
    finally:
        link.close()


def test_an_event_flood_keeps_the_link_and_the_recording_bounded(tmp_path, thread_errors):
    board = Hostile()
    frame = BoardCodec.encode(Event(1, "chatter", (("n", "1"),)))
    _flood(board, frame * 40, 0.002)  # 20 000 events a second
    link = _open(board)
    try:
        path = tmp_path / "flood.csv"
        link.stream(100)
        before = _rss_bytes()
        with Recorder(path, link, background=False) as rec:
            for _ in range(20):
                link.sleep(0.5)
                rec.poll()
                rec.flush()
        assert _rss_bytes() - before < 150 * MB
        back = load_recording(path)  # however many events: it reads back
        assert back.complete and len(back) > 500
        assert back.sidecar["events_count"] + back.sidecar["events_dropped"] > 0
        assert len(path.with_suffix(".yaml").read_bytes()) < 1 * MB
    finally:
        link.close()


def test_telemetry_with_words_for_numbers_is_counted_not_stored(thread_errors):
    board = Hostile()
    body = b"tm 1 100 nan inf 1"
    bad = b"@" + body + b"|%04X\n" % crc16(body)  # a good frame around values that are not numbers
    _flood(board, bad, 0.01)
    link = _open(board)
    try:
        link.stream(100)
        link.sleep(2.0)
        snap = link.snapshot()
        assert len(snap) > 50 and (abs(snap.values) < 1e6).all()
        assert sum(link.health().bad_frames.values()) > 50
    finally:
        link.close()


def test_the_limits_check_a_hello_without_a_link():
    info = BoardInfo((1, 0), "b", "f", "r", 500.0, 500.0, 10 ** 9, 1, 1)
    with pytest.raises(DeclarationError, match="params=1000000000 is more than 256"):
        check_hello(info)
    check_hello(BoardInfo((1, 0), "b", "f", "r", 500.0, 500.0, 256, 64, 16))
