"""Errors of the link layer, each with a one-line message a person can act on.

``LinkError`` and its subclasses mean the link itself failed (port missing, busy, not
permitted, lost, no reply, incompatible board). ``BoardRefused`` is separate: the board
answered and said no (PROTOCOL.md §4.3); it is not a link failure.
"""

from __future__ import annotations

import errno as _errno


class LinkError(Exception):
    """The link failed; ``str()`` is one line naming the port and the likely fix."""


class LinkTimeout(LinkError):
    """No reply within the timeout (after the allowed resends)."""


class LinkLost(LinkError):
    """The port went away (unplugged, closed, I/O error); the link is unusable."""


class IncompatibleBoard(LinkError):
    """The board speaks another major protocol version (PROTOCOL.md §5.1)."""


class BoardDeclarationRefused(IncompatibleBoard):
    """The board declares counts, names, units or times outside PROTOCOL.md §5.6."""


class SaveMismatch(LinkError):
    """``save`` stored an image whose CRC differs from the values read back (§5.5)."""

    def __init__(self, message: str, result) -> None:
        super().__init__(message)
        self.result = result


class BoardRefused(Exception):
    """The board replied ``err <seq> <code> <text>``: nothing changed on the board."""

    def __init__(self, code: str, text: str = "", verb: str = "") -> None:
        self.code = code
        self.text = text
        self.verb = verb
        what = f"{verb}: " if verb else ""
        super().__init__(f"board refused {what}{code}" + (f" ({text})" if text else ""))


_BUSY = {_errno.EBUSY, _errno.EAGAIN, _errno.EWOULDBLOCK}


def open_error(url: str, exc: BaseException) -> LinkError:
    """Turn an exception from opening ``url`` into a one-line LinkError with a likely fix."""
    code = getattr(exc, "errno", None)
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    if code == _errno.ENOENT:
        msg = f"port {url} not found: check the cable, or list ports with `rigbench ports`"
    elif code in (_errno.EACCES, _errno.EPERM):
        msg = (f"no permission to open {url}: add your user to the dialout (or uucp) group"
               " and log in again")
    elif code in _BUSY:
        msg = f"port {url} is busy: another program holds it; close that program first"
    elif isinstance(exc, ValueError) and "protocol" in text:
        msg = f"cannot open {url}: {text} (use a device path, a pyserial URL or sim://...)"
    elif "Inappropriate ioctl" in text or code == _errno.ENOTTY:
        msg = f"{url} is not a serial port"
    else:
        msg = f"cannot open {url}: {text}"
    return LinkError(msg)
