"""The link's raw tap (bench/rigbench/link/rawtap.py) gives whole lines however the port cuts the
bytes: the console never shows a frame start and its rest as two lines. Over-long lines are
cut at 200 bytes and marked; a kill byte ends an unfinished line.

What a whole line is comes from the protocol: a frame ends at its LF and is at most 200
bytes (protocol/PROTOCOL.md §2); the kill byte acts wherever it is found (§7.1)."""

import itertools

from fake_board import FakePort

from rigbench.link import Link
from rigbench.link.rawtap import RawTap


class ChoppyPort(FakePort):
    """A FakePort that hands out what the board sent in odd-sized pieces, whatever the
    reader asks for, and keeps every byte it handed out."""

    SIZES = (1, 2, 3, 5, 7, 11, 13, 17, 64, 9)

    def __init__(self, board=None) -> None:
        super().__init__(board)
        self._sizes = itertools.cycle(self.SIZES)
        self.delivered = bytearray()

    def read(self, size: int = 1) -> bytes:
        data = super().read(min(size, next(self._sizes)))
        self.delivered += data
        return data


def test_raw_since_gives_whole_frames_when_the_port_delivers_odd_chunks(thread_errors):
    port = ChoppyPort()
    link = Link.attach(port, url="fake://choppy")
    try:
        cur = link.raw_cursor()
        link.stream(250)
        link.get("tilt_kp", "tilt_ki")
        link.sleep(0.2)
        link.status()
        cur, lines = link.raw_since(cur)
    finally:
        link.close()
    got = [ln.text for ln in lines if ln.direction == "<"]
    # every line the board sent, complete, in order: what was delivered, split at LF
    whole = bytes(port.delivered).split(b"\n")[:-1]   # the last piece may be unfinished
    sent = [w.decode("ascii") for w in whole]
    start = sent.index(got[0])
    assert got == sent[start:start + len(got)]
    assert len(got) >= 40 and len(got) >= len(sent) - start - 1
    assert all(t.startswith("@") and t[-5] == "|" for t in got)      # PROTOCOL.md §2
    assert sum(t.startswith("@tm ") for t in got) >= 40
    assert any(t.startswith("@ok ") and "tilt_kp=" in t for t in got)
    assert not any(ln.cut for ln in lines)
    out = [ln.text for ln in lines if ln.direction == ">"]
    assert any(t.startswith("@get ") for t in out) and all(t.startswith("@") for t in out)


def _texts(tap, cursor=0):
    return [(ln.direction, ln.text, ln.cut) for ln in tap.since(cursor)[1]]


def test_a_line_split_anywhere_is_recorded_once_at_its_end():
    frame = b"@tm 12 3400 1.5 -2|ABCD\r\n@hb|1234\n"
    for cut in range(1, len(frame)):
        tap = RawTap()
        tap.record(1.0, "<", frame[:cut])
        tap.record(2.0, "<", frame[cut:])
        assert _texts(tap) == [("<", "@tm 12 3400 1.5 -2|ABCD", False),
                               ("<", "@hb|1234", False)], cut
    tap = RawTap()
    for i, byte in enumerate(frame):
        tap.record(float(i), "<", bytes([byte]))
    times = [ln.host_time_s for ln in tap.since(0)[1]]
    assert times == [float(frame.index(b"\n")), float(len(frame) - 1)]  # when its LF came


def test_an_over_long_line_is_cut_at_200_bytes_marked_and_the_next_line_is_whole():
    tap = RawTap()
    tap.record(0.0, "<", b"@" + b"x" * 150)
    tap.record(0.1, "<", b"y" * 150)              # passes the bound: recorded now, cut
    assert _texts(tap) == [("<", "@" + "x" * 150 + "y" * 49, True)]
    cur = tap.cursor()
    tap.record(0.2, "<", b"z" * 5000)              # the rest of it is dropped...
    tap.record(0.3, "<", b"zz\n@ok 7 a=1|0000\n")  # ...up to its LF
    assert _texts(tap, cur) == [("<", "@ok 7 a=1|0000", False)]
    assert len(tap._tails["<"].buf) == 0
    # a line of exactly 200 bytes is kept whole; 201 are cut (§2: 200 bytes with the LF, so
    # 200 without it is already too long for a frame, but shown whole)
    tap.record(0.4, "<", b"a" * 200 + b"\n" + b"b" * 201 + b"\n")
    assert [(len(t), c) for _, t, c in _texts(tap, cur)[1:]] == [(200, False), (200, True)]
    assert "…[cut]" in str(tap.since(0)[1][0])


def test_a_kill_byte_ends_an_unfinished_line_and_is_a_line_of_its_own():
    tap = RawTap()
    tap.record(0.0, ">", b"@set 5 tilt_kp=1")
    tap.record(0.1, ">", b"\x18\x18\x18")
    tap.record(0.2, ">", b"@kill 6|ABCD\n")
    assert _texts(tap) == [(">", "@set 5 tilt_kp=1", True), (">", "\\x18\\x18\\x18", False),
                           (">", "@kill 6|ABCD", False)]


def test_the_directions_keep_their_own_unfinished_lines():
    tap = RawTap()
    tap.record(0.0, "<", b"@tm 1 ")
    tap.record(0.0, ">", b"@hb|")
    tap.record(0.1, "<", b"2 3|0000\n")
    tap.record(0.1, ">", b"FFFF\n")
    assert _texts(tap) == [("<", "@tm 1 2 3|0000", False), (">", "@hb|FFFF", False)]
