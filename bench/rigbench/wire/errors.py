"""Protocol errors that say whose fault it is (PROTOCOL.md §9).

``LocalProtocolError``: we tried to do something the protocol does not allow (a bad name,
a value that cannot be written, a body that would be too long). A bug on our side.
``RemoteProtocolError``: the peer sent something illegal. ``code`` is one of the frame or
message error codes of PROTOCOL.md §9, so a decoder reports it as a ``BadFrame`` event.
"""


class ProtocolError(Exception):
    """Base class of every error the codec raises."""

    def __init__(self, code: str, detail: str = "") -> None:
        super().__init__(f"{code}: {detail}" if detail else code)
        self.code = code
        self.detail = detail


class LocalProtocolError(ProtocolError):
    """We misused the protocol (our bug)."""


class RemoteProtocolError(ProtocolError):
    """The peer sent something the protocol does not allow."""


# Frame-level codes (PROTOCOL.md §2).
FRAME_ERRORS = ("junk", "too_long", "truncated", "crc", "bad_char")
# Message-level codes (PROTOCOL.md §3).
MESSAGE_ERRORS = ("unknown_verb", "bad_number", "bad_field", "wrong_direction")
