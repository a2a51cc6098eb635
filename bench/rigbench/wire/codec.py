"""Host-side and board-side codecs: bytes in -> typed events, typed messages -> bytes.

``HostCodec`` is what a host program uses; ``BoardCodec`` what a board (our simulated one,
or a port of it to firmware) uses. Both share the framing of frame.py and the grammar of
messages.py. A rejected line becomes a ``BadFrame`` event carrying its error code; the
codecs never raise on received bytes. Sending an illegal message raises
LocalProtocolError.

No I/O, threads or clocks.
"""

from __future__ import annotations

from rigbench.wire.errors import RemoteProtocolError
from rigbench.wire.frame import MAX_LINE, BadFrame, Body, FrameDecoder, KillByte, encode_frame
from rigbench.wire.messages import (
    SEQ_MODULO,
    Command,
    format_body,
    parse_board_body,
    parse_host_body,
)

KILL = b"\x18"


class _Codec:
    _parse = staticmethod(parse_board_body)

    def __init__(self, max_line: int = MAX_LINE) -> None:
        self._frames = FrameDecoder(max_line)
        self.bad_frames = 0
        self.good_frames = 0

    def receive(self, data: bytes) -> list:
        """Feed received bytes; return messages, ``BadFrame`` and ``KillByte`` events."""
        out = []
        for ev in self._frames.feed(data):
            if type(ev) is Body:
                try:
                    out.append(self._parse(ev.text))
                    self.good_frames += 1
                except RemoteProtocolError as exc:
                    self.bad_frames += 1
                    out.append(BadFrame(exc.code, exc.detail, ev.text[:32].encode()))
            else:
                if type(ev) is BadFrame:
                    self.bad_frames += 1
                out.append(ev)
        return out

    @staticmethod
    def encode(msg) -> bytes:
        return encode_frame(format_body(msg))


class HostCodec(_Codec):
    """Host side: decodes board messages; numbers commands with wrapping sequence numbers."""

    _parse = staticmethod(parse_board_body)

    def __init__(self, max_line: int = MAX_LINE) -> None:
        super().__init__(max_line)
        self._next_seq = 1

    def next_seq(self) -> int:
        seq = self._next_seq
        self._next_seq = (seq + 1) % SEQ_MODULO
        return seq

    def command(self, cls: type[Command], *args, **kwargs) -> tuple[Command, bytes]:
        """Build command ``cls`` with the next sequence number; return it and its frame."""
        msg = cls(self.next_seq(), *args, **kwargs)
        return msg, self.encode(msg)

    @staticmethod
    def kill_bytes(repeat: int = 3) -> bytes:
        """The kill byte, repeated (PROTOCOL.md §7: the host sends it more than once)."""
        return KILL * repeat


class BoardCodec(_Codec):
    """Board side: decodes host commands, heartbeats and the kill byte."""

    _parse = staticmethod(parse_host_body)

    def receive_with_bodies(self, data: bytes) -> list:
        """As ``receive``, each event paired with the body text it was read from (None for
        frame errors and the kill byte): a board knows a resend by its sequence number and
        its body as sent (PROTOCOL.md §4.2), not by what the body means."""
        out = []
        for ev in self._frames.feed(data):
            if type(ev) is Body:
                try:
                    out.append((self._parse(ev.text), ev.text))
                    self.good_frames += 1
                except RemoteProtocolError as exc:
                    self.bad_frames += 1
                    out.append((BadFrame(exc.code, exc.detail, ev.text[:32].encode()), None))
            else:
                if type(ev) is BadFrame:
                    self.bad_frames += 1
                out.append((ev, None))
        return out


__all__ = ["HostCodec", "BoardCodec", "BadFrame", "KillByte", "KILL"]
