"""protocol/vectors/frames.json: every good frame decodes to its written meaning, every bad
frame yields its named error — fed whole, one byte at a time, and with junk around it."""

import json
from pathlib import Path

import pytest

from bench.wire import BoardCodec, HostCodec, as_dict
from bench.wire.frame import BadFrame

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
    from bench.wire import crc16

    block = VECTORS["crc_check"]
    assert crc16(block["input"].encode()) == int(block["check"], 16) == 0x29B1
