"""Getting the link back after it was lost, from a thread worker of the App.

A USB board pulled out and plugged back in reappears under the same device path; a board
that reset may print boot text before its first frame. When a link is lost the App starts
:func:`start_watch`: for a device path it waits until the path exists again and reopens it
(rigbench.link.reopen: same URL, handshake, stream rate restored, what changed); for any
other URL it tries once, when asked (ctrl+r). The result comes back as a
:class:`LinkReopened` message; the App adopts the new link and says what changed. Nothing
here arms: the motor stays as the board reports it.
"""

from __future__ import annotations

import time

from textual.message import Message
from textual.worker import get_current_worker

from rigbench.link.reopen import LinkMemory, device_present, reopen

RETRY_S = 0.5  # wall-clock seconds between attempts (the link, and its clock, are gone)


class LinkReopened(Message):
    """The link at ``old`` is open again as ``reopened.link`` (a link.reopen.Reopened)."""

    def __init__(self, old, reopened) -> None:
        super().__init__()
        self.old, self.reopened = old, reopened


class RelinkNote(Message):
    """How the reopening goes, in words, for the bar."""

    def __init__(self, old, text: str) -> None:
        super().__init__()
        self.old, self.text = old, text


def automatic(url: str) -> bool:
    """Reopen on its own only a device path: its reappearing is the sign the board is back."""
    return "://" not in url


def waiting_text(url: str) -> str:
    if automatic(url):
        return f"reconnects when {url} is back (ctrl+r: now); never re-arms"
    return "ctrl+r opens the link again; never re-arms"


def start_watch(app, old, memory: LinkMemory, *, once: bool, baudrate: int):
    """Run the reopening in a worker of group ``relink``: until it succeeds, the App moves
    to another link, or (``once``) after one attempt."""

    def work() -> None:
        worker = get_current_worker()
        while not worker.is_cancelled and app.link is old:
            if device_present(memory.url):
                try:
                    result = reopen(memory, baudrate=baudrate)
                except Exception as exc:  # noqa: BLE001 - told in words, then tried again
                    text = str(exc).strip().splitlines()
                    app.post_message(RelinkNote(old, "not back yet: " + (
                        text[0] if text else type(exc).__name__)))
                else:
                    app.post_message(LinkReopened(old, result))
                    return
            elif once:
                app.post_message(RelinkNote(old, f"{memory.url} is not there"))
            if once:
                return
            time.sleep(RETRY_S)

    return app.run_worker(work, thread=True, group="relink", exclusive=True,
                          exit_on_error=False, name=f"reopen {memory.url}")
