"""protocol/vectors/frames.json: every good frame decodes to its written meaning, every bad
frame yields its named error — fed whole, one byte at a time, and with junk around it;
every loop reply declares its written loop or is refused with its named error."""

import json
from dataclasses import asdict
from pathlib import Path

import pytest

from rigbench.wire import BoardCodec, HostCodec, LoopInfo, as_dict
from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.frame import BadFrame, Body, FrameDecoder, KillByte

VECTORS = json.loads((Path(__file__).parents[2] / "protocol" / "vectors" / "frames.json").read_text())


def _receiver(direction):
    # Frames sent by the host are read by a board codec, and the reverse.
    return BoardCodec() if direction == "host" else HostCodec()


def _feed_whole(codec, raw):
    return codec.receive(raw)


def _feed_bytewise(codec, raw):
    out = []
    for i in range(len(raw)):
        out += codec.receive(raw[i : i + 1])
    return out


def _messages(events):
    return [e for e in events if not isinstance(e, BadFrame)]


@pytest.mark.parametrize("feed", [_feed_whole, _feed_bytewise])
@pytest.mark.parametrize("vec", VECTORS["good"], ids=lambda v: v["frame"][:24])
def test_good_vector(vec, feed):
    raw = vec["frame"].encode("ascii")
    events = feed(_receiver(vec["direction"]), raw)
    assert len(events) == 1 and not isinstance(events[0], BadFrame), events
    assert as_dict(events[0]) == vec["meaning"]


@pytest.mark.parametrize("vec", VECTORS["good"], ids=lambda v: v["frame"][:24])
def test_good_vector_with_junk_around(vec):
    raw = vec["frame"].encode("ascii")
    codec = _receiver(vec["direction"])
    events = codec.receive(b"\x00\xffnoise AT\r\n" + b"zz" + raw + b"trailing junk\n" + raw)
    msgs = _messages(events)
    assert [as_dict(m) for m in msgs] == [vec["meaning"], vec["meaning"]]
    assert any(isinstance(e, BadFrame) and e.code == "junk" for e in events)


def test_good_vector_reencodes_to_the_same_meaning():
    # Numbers may be written differently (2.5e1 -> 25) but the meaning survives a round trip.
    for vec in VECTORS["good"]:
        codec = _receiver(vec["direction"])
        (msg,) = codec.receive(vec["frame"].encode())
        (again,) = _receiver(vec["direction"]).receive(codec.encode(msg))
        assert as_dict(again) == vec["meaning"]


@pytest.mark.parametrize("feed", [_feed_whole, _feed_bytewise])
@pytest.mark.parametrize("vec", VECTORS["bad"], ids=lambda v: v["error"] + ":" + v["frame"][:20])
def test_bad_vector(vec, feed):
    raw = vec["frame"].encode("latin-1")
    events = feed(_receiver(vec["direction"]), raw)
    codes = [e.code for e in events if isinstance(e, BadFrame)]
    assert codes and codes[0] == vec["error"], events


def test_bad_frame_does_not_hide_next_good_frame():
    good = next(v for v in VECTORS["good"] if v["direction"] == "host")
    for vec in VECTORS["bad"]:
        if vec["direction"] != "host":
            continue
        codec = BoardCodec()
        events = codec.receive(vec["frame"].encode("latin-1") + good["frame"].encode())
        assert as_dict(_messages(events)[-1]) == good["meaning"], vec


def test_crc_check_block_matches_catalogue():
    # G. Cook, Catalogue of parametrised CRC algorithms: CRC-16/IBM-3740 check 0x29B1.
    from rigbench.wire import crc16

    block = VECTORS["crc_check"]
    assert crc16(block["input"].encode()) == int(block["check"], 16) == 0x29B1


@pytest.mark.parametrize("vec", VECTORS["loop_replies"], ids=lambda v: v["frame"][-32:])
def test_loop_reply_vector(vec):
    # PROTOCOL.md §5.4: the codec reads every loop reply; the declaration is read from its
    # fields, optional fields absent reading as null, a bad value refused with its code.
    (msg,) = HostCodec().receive(vec["frame"].encode("ascii"))
    assert as_dict(msg)["type"] == "Ok"
    if "error" in vec:
        with pytest.raises(RemoteProtocolError) as exc:
            LoopInfo.from_fields(msg.fields)
        assert exc.value.code == vec["error"]
    else:
        loop = LoopInfo.from_fields(msg.fields)
        assert {**asdict(loop), "gains": list(loop.gains)} == vec["declares"]
        # what a board sends for that declaration reads back the same
        assert LoopInfo.from_fields([(k, str(v)) for k, v in loop.to_fields()]) == loop


def test_worked_example_frames_carry_real_crcs():
    # PROTOCOL.md §9 says its CRCs are real; the refused-frames example is meant to be bad.
    import re

    from rigbench.wire import crc16

    spec = (Path(__file__).parents[2] / "protocol" / "PROTOCOL.md").read_text()
    session = spec[spec.index("## 9. Worked examples"):spec.index("### Refused and unreadable")]
    frames = re.findall(r"@([^|@\n]*)\|([0-9A-F]{4})", session)
    assert len(frames) > 20 and any(b.startswith("ok 22 index=0 name=tilt") for b, _ in frames)
    assert [(b, c) for b, c in frames if crc16(b.encode()) != int(c, 16)] == []


@pytest.mark.parametrize("vec", VECTORS["streams"], ids=lambda v: v["bytes"][:24])
def test_stream_vector_counts_the_same_errors_however_it_is_split(vec):
    # PROTOCOL.md §2: errors counted byte by byte; every split of the stream must give them
    data = vec["bytes"].encode("latin-1")
    splits = [len(data), 1, 2, 3, 7, 64]
    for size in splits:
        dec = FrameDecoder()
        events = []
        for i in range(0, len(data), size):
            events += dec.feed(data[i:i + size])
        assert [e.code for e in events if isinstance(e, BadFrame)] == vec["errors"], size
        assert [e.text for e in events if isinstance(e, Body)] == vec["bodies"], size
        assert sum(isinstance(e, KillByte) for e in events) == vec["kills"], size
