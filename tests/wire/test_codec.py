"""Codec behaviour: kill byte, resynchronisation, bounded buffers, whose-fault errors,
round trip of every command between a host and a board codec wired back to back."""

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.wire import BoardCodec, HostCodec, KillByte, LocalProtocolError, encode_frame
from rigbench.wire import messages as m
from rigbench.wire.frame import MAX_LINE, BadFrame, FrameDecoder, KILL_BYTE


def test_kill_byte_mid_line_is_seen_and_discards_the_partial_frame():
    board = BoardCodec()
    frame = HostCodec().encode(m.Arm(4))
    events = board.receive(frame[:5] + bytes([KILL_BYTE]) + frame[5:])
    assert isinstance(events[0], KillByte)
    assert not any(isinstance(e, m.Arm) for e in events)  # the cut frame never executes
    assert board.receive(frame) == [m.Arm(4)]


def test_three_kill_bytes_give_three_events():
    assert HostCodec.kill_bytes() == b"\x18\x18\x18"
    assert BoardCodec().receive(HostCodec.kill_bytes()) == [KillByte()] * 3


def test_resync_after_unterminated_garbage_on_start_marker():
    board = BoardCodec()
    ev = board.receive(b"@@@garbage without end @" + HostCodec().encode(m.Disarm(9)))
    assert ev[-1] == m.Disarm(9)
    assert isinstance(ev[0], BadFrame) and ev[0].code == "truncated"


def test_overlong_line_is_reported_once_and_skipped():
    dec = FrameDecoder()
    events = []
    for _ in range(50):
        events += dec.feed(b"x" * 100)
        assert dec.buffered < MAX_LINE
    events += dec.feed(b"\n" + encode_frame("hb"))
    assert [e.code for e in events if isinstance(e, BadFrame)] == ["too_long"]
    assert events[-1].text == "hb"


@pytest.mark.parametrize(
    "msg",
    [
        m.Hello(1), m.DescribeParam(2, 7), m.DescribeSignal(3, 0), m.DescribeLoop(4, 1),
        m.Get(5, ("tilt_kp", "trip_tilt")), m.Set(6, (("tilt_kp", 0.5), ("tilt_ki", 12.25))),
        m.Save(7), m.Restore(8), m.Arm(9), m.Disarm(10), m.Clear(11),
        m.Mode(12, "relay", (("loop", "tilt"), ("amp", "0.4"))), m.Mode(13, "off"),
        m.Stream(14, 250.0), m.Kill(15), m.StatusRequest(16), m.Heartbeat(),
    ],
)
def test_every_host_message_round_trips(msg):
    assert BoardCodec().receive(HostCodec.encode(msg)) == [msg]


@pytest.mark.parametrize(
    "msg",
    [
        m.Ok(1, (("proto", "1.0"), ("rate_hz", "500"))), m.Err(2, "range", "tilt_kp 0..10"),
        m.Telemetry(3, 4294967295, (1.5, -0.25, 1e-05)), m.Status(5, (("motor", "off"),)),
        m.Event(6, "trip", (("cause", "kill"),)),
    ],
)
def test_every_board_message_round_trips(msg):
    assert HostCodec().receive(BoardCodec.encode(msg)) == [msg]


def test_sequence_numbers_wrap():
    host = HostCodec()
    host._next_seq = 65535
    assert host.command(m.Arm)[0].seq == 65535
    assert host.command(m.Arm)[0].seq == 0


@pytest.mark.parametrize(
    "bad",
    [
        m.Set(1, (("Tilt", 1.0),)),  # not a name
        m.Set(1, (("kp", float("nan")),)),
        m.Get(1, ()),
        m.Mode(1, "dance"),
        m.Err(1, "range", "x" * 300),
        m.Ok(1, (("note", "two words"),)),
        m.Arm(70000),
    ],
)
def test_sending_illegal_messages_is_our_fault(bad):
    with pytest.raises(LocalProtocolError):
        HostCodec.encode(bad)


@settings(max_examples=400, deadline=None)
@given(st.lists(st.binary(max_size=400), max_size=20))
def test_decoders_never_raise_and_stay_bounded(chunks):
    # Property: arbitrary bytes never raise anything and never grow the buffer unbounded.
    for codec in (HostCodec(), BoardCodec()):
        for chunk in chunks:
            for ev in codec.receive(chunk):
                assert isinstance(ev, (BadFrame, KillByte)) or hasattr(ev, "__dataclass_fields__")
            assert codec._frames.buffered < MAX_LINE


_names = st.from_regex(r"[a-z][a-z0-9_]{0,10}", fullmatch=True)
_values = st.floats(allow_nan=False, allow_infinity=False, min_value=-1e9, max_value=1e9)


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(_names, _values, min_size=1, max_size=5), st.integers(0, 65535))
def test_set_round_trips_to_seven_digits(values, seq):
    msg = m.Set(seq, tuple(values.items()))
    try:
        raw = HostCodec.encode(msg)
    except LocalProtocolError as exc:
        assert exc.code == "too_long"  # the only legal refusal for valid names and values
        return
    (got,) = BoardCodec().receive(raw)
    assert got.seq == seq
    for (k, v), (k2, v2) in zip(msg.values, got.values):
        assert k == k2 and v2 == pytest.approx(v, rel=1e-6, abs=1e-300)


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=120))
def test_frames_with_any_flipped_byte_are_never_accepted_as_other_frames(noise):
    # A CRC-16 detects every single-byte error: flip one byte of a frame, never get a message
    # different from the original (common practice, no source: CRC burst-error property).
    raw = bytearray(HostCodec.encode(m.Set(3, (("tilt_kp", 0.64),))))
    if not noise:
        return
    i = noise[0] % (len(raw) - 1)
    raw[i] ^= (noise[-1] | 1)
    events = BoardCodec().receive(bytes(raw))
    assert all(e == m.Set(3, (("tilt_kp", 0.64),)) or isinstance(e, (BadFrame, KillByte)) for e in events)


_tm_text = st.lists(
    st.text(alphabet="0123456789.-+eE", min_size=1, max_size=8), min_size=0, max_size=6
).map(lambda vals: " ".join(["tm", "12", "3400"] + vals))


@settings(max_examples=1500, deadline=None)
@given(st.one_of(_tm_text, st.text(alphabet="tm 0123456789.-+eE", max_size=40)))
def test_fast_telemetry_path_agrees_with_the_token_parser(text):
    # The fast path must accept exactly what the general parser accepts, with equal results.
    from rigbench.wire.errors import RemoteProtocolError

    def outcome(parse):
        try:
            return parse(text)
        except RemoteProtocolError as exc:
            return exc.code

    assert outcome(m.parse_board_body) == outcome(m.parse_board_body_strict)
