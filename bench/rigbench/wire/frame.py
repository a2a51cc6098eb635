"""Framing of the line protocol: bytes in, frame bodies out; bodies in, bytes out.

PROTOCOL.md §2. A frame is ``@`` BODY ``|`` CRC ``\\n`` where BODY is printable ASCII
(0x20..0x7E, without ``@`` and ``|``), CRC is four hex digits of CRC-16/IBM-3740 over the
BODY bytes, an optional ``\\r`` may precede the ``\\n``, and the whole line including the
marker and the LF is at most ``MAX_LINE`` bytes. The kill byte 0x18 may appear anywhere; it
is acted on where it is found and it discards a partial frame.

The decoder never grows beyond ``max_line`` bytes of buffered input: a longer line is
reported as ``too_long`` and skipped up to the next ``@`` or LF.

No I/O here.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from rigbench.wire.crc import crc16
from rigbench.wire.errors import LocalProtocolError, RemoteProtocolError

START = 0x40  # "@"  PROTOCOL.md §2: start marker
CRC_SEP = 0x7C  # "|"
KILL_BYTE = 0x18  # ASCII CAN; PROTOCOL.md §7
MAX_LINE = 200  # bytes from "@" to "\n" inclusive
MAX_BODY = MAX_LINE - 7  # "@" + "|" + 4 hex + "\n"

_HEX = frozenset(b"0123456789ABCDEFabcdef")
# The common case in one match: a whole well-formed line (body chars, "|", four hex digits,
# optional CR). Anything else goes through parse_line, which names the error.
_GOOD_LINE = re.compile(rb"@([\x20-\x3f\x41-\x7b\x7d\x7e]{1,%d})\|([0-9A-Fa-f]{4})\r?" % MAX_BODY)


@dataclass(frozen=True)
class Body:
    """A frame whose CRC checked: its body text."""

    text: str


@dataclass(frozen=True)
class BadFrame:
    """A line the decoder rejected. ``code`` is a PROTOCOL.md §9 error code."""

    code: str
    detail: str = ""
    raw: bytes = b""


@dataclass(frozen=True)
class KillByte:
    """The kill byte was seen in the stream (PROTOCOL.md §7)."""


def _check_body(body: bytes) -> None:
    for b in body:
        if b < 0x20 or b > 0x7E or b == START or b == CRC_SEP:
            raise RemoteProtocolError("bad_char", f"byte 0x{b:02X} in frame body")


def parse_line(line: bytes) -> str:
    """Check one line (without its LF; may end in CR) that starts at ``@``; return the body.

    Raises RemoteProtocolError with a frame error code. Used by the streaming decoder and
    directly by tests and firmware authors checking a single frame.
    """
    if len(line) + 1 > MAX_LINE:
        raise RemoteProtocolError("too_long", f"{len(line) + 1} bytes > {MAX_LINE}")
    if line.endswith(b"\r"):
        line = line[:-1]
    if not line or line[0] != START:
        raise RemoteProtocolError("junk", "line does not start with '@'")
    bar = line.rfind(b"|")
    if bar < 0:
        raise RemoteProtocolError("truncated", "no '|' and CRC before end of line")
    body, field = line[1:bar], line[bar + 1 :]
    if len(field) != 4 or not all(c in _HEX for c in field):
        raise RemoteProtocolError("crc", f"CRC field {field!r} is not four hex digits")
    _check_body(body)
    if not body:
        raise RemoteProtocolError("truncated", "empty body")
    want = int(field, 16)
    got = crc16(body)
    if want != got:
        raise RemoteProtocolError("crc", f"CRC {field.decode()} but body gives {got:04X}")
    return body.decode("ascii")


def encode_frame(body: str) -> bytes:
    """Wrap a body into a frame. Raises LocalProtocolError if the body is not allowed."""
    try:
        raw = body.encode("ascii")
    except UnicodeEncodeError as exc:
        raise LocalProtocolError("bad_char", f"non-ASCII in body {body!r}") from exc
    if not raw:
        raise LocalProtocolError("truncated", "empty body")
    if len(raw) > MAX_BODY:
        raise LocalProtocolError("too_long", f"body of {len(raw)} bytes > {MAX_BODY}")
    try:
        _check_body(raw)
    except RemoteProtocolError as exc:
        raise LocalProtocolError(exc.code, exc.detail) from None
    return b"@%s|%04X\n" % (raw, crc16(raw))


class FrameDecoder:
    """Streaming decoder: ``feed(bytes)`` returns Body, BadFrame and KillByte events in order.

    Buffers at most ``max_line`` bytes between calls. Never raises on any input.
    """

    def __init__(self, max_line: int = MAX_LINE) -> None:
        self.max_line = max_line
        self._buf = b""
        self._skipping = False  # inside an over-long line: drop up to next '@' or LF

    @property
    def buffered(self) -> int:
        return len(self._buf)

    def feed(self, data: bytes) -> list:
        out: list = []
        if KILL_BYTE in data:
            pieces = data.split(b"\x18")
            for i, piece in enumerate(pieces):
                if i:
                    # PROTOCOL.md §7: the kill discards a partial frame.
                    self._buf = b""
                    self._skipping = False
                    out.append(KillByte())
                if piece:
                    self._feed(piece, out)
        else:
            self._feed(data, out)
        return out

    def _feed(self, data: bytes, out: list) -> None:
        if self._skipping:
            cut = _first_of(data, b"\n", b"@")
            if cut < 0:
                return
            self._skipping = False
            data = data[cut + 1 :] if data[cut] == 0x0A else data[cut:]
        buf = self._buf + data if self._buf else data
        start = 0
        while True:
            nl = buf.find(b"\n", start)
            if nl < 0:
                break
            self._line(buf[start:nl], out)
            start = nl + 1
        rest = buf[start:]
        at = rest.rfind(b"@")
        if at > 0:                    # reported as soon as the '@' that ends them arrives
            out.extend(self._bad_prefix(rest[:at]))
            rest = rest[at:]
        if len(rest) >= self.max_line:
            out.append(BadFrame("too_long", f"no LF within {self.max_line} bytes", rest[:32]))
            rest = b""
            self._skipping = True
        self._buf = rest

    def _segment_error(self, seg: bytes, is_frame: bool) -> BadFrame:
        """The error of a run of bytes that ended without a good frame: a frame (from its
        '@') cut short by the next '@', or junk; either one reaching ``max_line`` bytes is
        ``too_long`` (the byte-by-byte rule of PROTOCOL.md §2)."""
        if len(seg) >= self.max_line:
            return BadFrame("too_long", f"no LF within {self.max_line} bytes", seg[:32])
        if is_frame:
            return BadFrame("truncated", "a new '@' arrived before the frame ended", seg[:32])
        return BadFrame("junk", "bytes outside a frame", seg[:32])

    def _bad_prefix(self, prefix: bytes) -> list[BadFrame]:
        """What was before the last '@' of a line: junk before the first '@', then one error
        per frame abandoned by the next '@'. The same however the bytes were split."""
        parts = prefix.split(b"@")
        out = [self._segment_error(parts[0], False)] if parts[0] else []
        out += [self._segment_error(b"@" + p, True) for p in parts[1:]]
        return out

    def _line(self, line: bytes, out: list) -> None:
        if not line or line == b"\r":
            return
        at = line.rfind(b"@")
        if at < 0:
            out.append(self._segment_error(line, False))
            return
        if at > 0:
            out.extend(self._bad_prefix(line[:at]))
            line = line[at:]
        good = _GOOD_LINE.fullmatch(line)
        if good is not None and len(line) < self.max_line:
            body = good.group(1)
            if crc16(body) == int(good.group(2), 16):
                out.append(Body(body.decode("ascii")))
                return
        try:
            out.append(Body(parse_line(line)))
        except RemoteProtocolError as exc:
            out.append(BadFrame(exc.code, exc.detail, line[:32]))


def _first_of(data: bytes, a: bytes, b: bytes) -> int:
    i, j = data.find(a), data.find(b)
    if i < 0:
        return j
    if j < 0:
        return i
    return min(i, j)
