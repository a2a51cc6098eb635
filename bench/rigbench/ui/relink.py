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

from rigbench.link.reopen import LinkMemory, device_present, remember, reopen

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


class RelinkMixin:
    """The App's part in a lost link: say so, close the port, reopen, adopt, report.
    Mixed into RigApp (uses its ``link``, ``memory``, ``note``, ``adopt``, ...)."""

    def link_lost(self, link) -> None:
        """The link went: say so loudly, stop experiments, close the port (a USB device
        that comes back needs its old descriptor released) and start reopening."""
        self._lost_link = link
        if self.memory is None:
            self.memory = remember(link)
        self.cancel_experiments()
        link.close()
        self.relink_text = waiting_text(self.url)
        self.notify("Link lost: a kill cannot reach the board. Use the hardware cut-off.",
                    title="KILL NOT DELIVERED", severity="error", timeout=10)
        if automatic(self.url):
            start_watch(self, link, self.memory, once=False, baudrate=self.baudrate)

    def action_reconnect(self) -> None:
        link = self.link
        if link is None:
            self.connect(self.url)
        elif link is self._lost_link:
            self.note("trying to open the link again…")
            start_watch(self, link, self.memory, once=not automatic(self.url),
                               baudrate=self.baudrate)
        else:
            self.note("the link works: nothing to reconnect")
        self.update_safety()

    def on_relink_note(self, message: RelinkNote) -> None:
        if message.old is self.link:
            self.relink_text = f"{waiting_text(self.url)}; {message.text}"
            self.update_safety()

    def on_link_reopened(self, message: LinkReopened) -> None:
        result = message.reopened
        if message.old is not self.link:  # the user opened another link meanwhile
            result.link.close()
            return
        self.adopt(result.link)
        changes = result.changes() or ["nothing changed that the host can see"]
        motor = result.motor + ("" if result.motor in ("armed", "running") else
                                ", not re-armed")
        text = f"link back: {'; '.join(changes)}; motor {motor}"
        self.note(text)
        loud = result.motor in ("armed", "running") or result.fault or result.other_board
        self.notify(text, title="Link reopened", severity="error" if loud else "warning",
                    timeout=10)
        self.update_safety()
