"""A simulated board on a pseudo-terminal behind a symlink that stays put, for tests of a
board that goes away and comes back on the same path (a USB board pulled out and plugged
in again): ``PtyBoard(url, link_path)`` serves it and points ``link_path`` at its pty;
``stop()`` takes it away (the pty closes, the symlink goes); a new ``PtyBoard`` on the same
``link_path`` brings one back. ``boot_text`` is written before the board's first frame, as
a board that prints a boot banner when its port opens does; ``uptime_s`` starts its clock
where a board that has run that long would be (a real session is minutes, not the test's
fraction of a second)."""

from __future__ import annotations

import os
import threading

from rigbench.rig.pty import serve_pty
from rigbench.rig.simlink import SimLink
from rigbench.rig.url import parse_sim_url


class ChattySimLink(SimLink):
    """A SimLink that prints ``boot_text`` (not frames) once a host has opened its port and
    written to it, as a board that resets when its port opens does (text written before
    the open would be flushed by the opening host, and never seen)."""

    def __init__(self, options, boot_text: bytes = b"") -> None:
        super().__init__(options)
        self._boot_text = boot_text
        self._host_seen = False

    def write(self, data: bytes) -> None:
        self._host_seen = True
        super().write(data)

    def drain(self, max_bytes=None) -> bytes:
        out = super().drain(max_bytes)
        if self._boot_text and self._host_seen:
            out, self._boot_text = self._boot_text + out, b""
        return out


class PtyBoard:
    def __init__(self, url: str, link_path, *, boot_text: bytes = b"",
                 sim: SimLink | None = None, uptime_s: float = 0.0) -> None:
        self.link_path = str(link_path)
        self.sim = sim or ChattySimLink(parse_sim_url(url), boot_text)
        if uptime_s:  # its clock as if it had been running that long already
            self.sim.board.clock_start_us = int(uptime_s * 1e6)
        self.ready = threading.Event()
        self.halt = threading.Event()
        self.path = None
        self.thread = threading.Thread(target=self._run, args=(url,), daemon=True)
        self.thread.start()
        assert self.ready.wait(10), "the pty board did not start"

    def _run(self, url: str) -> None:
        def on_ready(path):
            self.path = path
            tmp = self.link_path + ".new"
            if os.path.lexists(tmp):
                os.unlink(tmp)
            os.symlink(path, tmp)
            os.replace(tmp, self.link_path)  # the path reappears in one step
            self.ready.set()

        serve_pty(parse_sim_url(url), on_ready=on_ready, stop=self.halt, link=self.sim)

    def stop(self) -> None:
        """The board goes away: the pty closes and the path disappears."""
        if os.path.lexists(self.link_path):
            os.unlink(self.link_path)
        self.halt.set()
        self.thread.join(10)
