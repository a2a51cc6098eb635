"""Kill from a second terminal: the program holding a device port (opened exclusively)
listens on a small Unix-domain socket named after the port, in a private runtime folder,
and passes a kill request on to its link at once.

- ``KillService(link, port)``: started by ``Link.open`` for device ports (not for
  ``sim://`` or other URLs). A client that connects and sends ``kill\\n`` gets one JSON line
  as soon as the kill bytes are written (``{"sent": true, ...}``), then one with the
  outcome of ``rigbench.link.killing.kill_and_confirm`` (confirmed, escalated, motor,
  ``latency_board_s``: from the kill bytes being written to the time stamp of the board's
  trip event, that stamp mapped onto the link clock by the telemetry's clock map (which
  takes out the link's latency, timebase.ClockMap); None without a trip event).
- ``request_kill(port, timeout_s)``: the client side (``rigbench kill``). Returns None when
  no program answers on the port's socket.

The folder is ``$XDG_RUNTIME_DIR/rigbench`` or ``<tmp>/rigbench-<uid>``, mode 0700: only
the same user can ask. POSIX only (``socket.AF_UNIX``); elsewhere the service does not
start and ``request_kill`` returns None.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import socket
import tempfile
import threading
from pathlib import Path

from rigbench.link.errors import LinkError
from rigbench.link.killing import kill_and_confirm

__all__ = ["KillService", "request_kill", "socket_path"]

_HAS_UNIX = hasattr(socket, "AF_UNIX") and os.name == "posix"


def runtime_dir() -> Path:
    base = os.environ.get("XDG_RUNTIME_DIR")
    folder = Path(base) / "rigbench" if base else \
        Path(tempfile.gettempdir()) / f"rigbench-{os.getuid()}"
    return folder


def socket_path(port: str) -> Path:
    """The socket of the program holding ``port`` (a device path, links resolved)."""
    real = os.path.realpath(port)
    name = re.sub(r"[^A-Za-z0-9]+", "_", real).strip("_") or "port"
    digest = hashlib.sha1(real.encode()).hexdigest()
    if len(name) > 48:   # a Unix socket path has about 100 bytes
        name = name[:32] + "_" + digest[:12]
    path = runtime_dir() / f"{name}.kill"
    if len(str(path)) > 100:
        path = runtime_dir() / f"{digest[:16]}.kill"
    return path


class KillService:
    """Listens for kill requests for ``link`` (see the module docstring)."""

    def __init__(self, link, port: str) -> None:
        self.link = link
        self.path = socket_path(port)
        self._stop = threading.Event()
        self._sock: socket.socket | None = None
        self._thread: threading.Thread | None = None

    def start(self) -> "KillService":
        if not _HAS_UNIX:
            return self
        folder = self.path.parent
        folder.mkdir(mode=0o700, parents=True, exist_ok=True)
        if folder.stat().st_uid != os.getuid() or folder.stat().st_mode & 0o077:
            return self   # not our private folder: do not listen there
        if self.path.exists():
            if request_kill(str(self.path), probe=True) is not None:
                return self   # someone answers already (cannot hold the same port)
            self.path.unlink(missing_ok=True)   # left by a program that ended abruptly
        sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        try:
            sock.bind(str(self.path))
            sock.listen(4)
        except OSError:
            sock.close()
            return self
        sock.settimeout(0.2)
        self._sock = sock
        self._thread = threading.Thread(target=self._serve, daemon=True,
                                        name=f"kill-service {self.path.name}")
        self._thread.start()
        return self

    def close(self) -> None:
        self._stop.set()
        if self._thread is not None and self._thread is not threading.current_thread():
            self._thread.join(1.0)
        if self._sock is not None:
            self._sock.close()
            try:
                self.path.unlink()
            except OSError:
                pass
            self._sock = None

    def _serve(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._sock.accept()
            except (socket.timeout, OSError):
                continue
            with conn:
                try:
                    self._answer(conn)
                except OSError:
                    pass   # the client went away; the kill (if asked) was still sent

    def _answer(self, conn) -> None:
        conn.settimeout(1.0)
        line = conn.recv(64).strip()
        if line == b"ping":
            conn.sendall(b'{"pid": %d}\n' % os.getpid())
            return
        if line != b"kill":
            return
        link = self.link
        cursor = link.event_cursor()

        def sent(t: float) -> None:
            conn.sendall((json.dumps({"sent": True, "pid": os.getpid(), "sent_s": t}) + "\n")
                         .encode())

        try:
            out = kill_and_confirm(link, reason="user", on_sent=sent)
        except LinkError as exc:
            conn.sendall((json.dumps({"confirmed": False, "error": str(exc)}) + "\n").encode())
            return
        _, events = link.events_since(cursor)
        trip_s = next((e.host_time_s for e in events if e.source == "board"
                       and e.kind == "trip"), None)
        latency = None if trip_s is None else trip_s - out.sent_s
        conn.sendall((json.dumps({"confirmed": out.confirmed, "escalated": out.escalated,
                                  "motor": out.motor, "steps": list(out.steps),
                                  "latency_board_s": latency}) + "\n").encode())


def request_kill(port: str, *, timeout_s: float = 3.0, probe: bool = False) -> dict | None:
    """Ask the program holding ``port`` (a device path, or the socket path itself with
    ``probe``) to kill. Returns its answers merged (``sent``, ``confirmed``…), or None when
    nobody listens. ``probe`` only checks that someone answers (no kill)."""
    if not _HAS_UNIX:
        return None
    path = port if probe else str(socket_path(port))
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    sock.settimeout(timeout_s)
    try:
        sock.connect(path)
    except OSError:
        sock.close()
        return None
    answers: dict = {}
    with sock:
        try:
            sock.sendall(b"ping\n" if probe else b"kill\n")
            data = b""
            while True:
                chunk = sock.recv(4096)
                if not chunk:
                    break
                data += chunk
        except OSError:
            pass   # whatever arrived is kept: "sent" comes first
        for line in data.decode("utf-8", "replace").splitlines():
            try:
                answers.update(json.loads(line))
            except ValueError:
                continue
    return answers if (answers or probe) else None
