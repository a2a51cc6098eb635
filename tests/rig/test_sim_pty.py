"""A simulated board on a pseudo-terminal: opened by device path like a real board, owner-
only permissions, telemetry dropped and counted when nobody reads, and the command-line
front (device path printed, symlink made and removed, Ctrl-C ends it with code 0)."""

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
import serial

from rigbench.rig.pty import run_sim_server, serve_pty
from rigbench.rig.simlink import SimLink
from rigbench.rig.url import parse_sim_url
from rigbench.wire import HostCodec
from rigbench.wire import messages as m

pytestmark = pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs POSIX ptys")

ROOT = Path(__file__).parents[2]


class Served:
    def __init__(self, url: str) -> None:
        self.link = SimLink(parse_sim_url(url))
        self.ready = threading.Event()
        self.stop = threading.Event()
        self.path = None
        self.stats = None

        def on_ready(path):
            self.path = path
            self.ready.set()

        def run():
            self.stats = serve_pty(parse_sim_url(url), on_ready=on_ready, stop=self.stop,
                                   link=self.link)

        self.thread = threading.Thread(target=run, daemon=True)
        self.thread.start()
        assert self.ready.wait(10)

    def close(self):
        self.stop.set()
        self.thread.join(10)


def ask(port, codec, cls, *args, tries=200):
    msg, frame = codec.command(cls, *args)
    port.write(frame)
    for _ in range(tries):
        for x in codec.receive(port.read(port.in_waiting or 1)):
            if isinstance(x, (m.Ok, m.Err)) and x.seq == msg.seq:
                return x
    raise AssertionError(f"no reply to {cls.VERB}")


def test_board_on_a_pty():
    s = Served("sim://wheel")
    try:
        assert os.stat(s.path).st_mode & 0o777 == 0o600
        with serial.Serial(s.path, timeout=0.05) as port:
            codec = HostCodec()
            assert ask(port, codec, m.Hello).get("board") == "sim-wheel-1"
            port.write(HostCodec.kill_bytes())
            assert ask(port, codec, m.StatusRequest).get("fault") == "kill"
    finally:
        s.close()
    assert s.stats.bytes_in > 0 and s.stats.bytes_out > 0


def test_unread_telemetry_is_dropped_and_counted():
    s = Served("sim://wheel?rate=2000")
    try:
        with serial.Serial(s.path, timeout=0.05) as port:
            codec = HostCodec()
            ask(port, codec, m.Stream, 2000.0)
            board = s.link.board
            for _ in range(1000):                         # nobody reads: the pty fills up
                if board.drops > 0:
                    break
                time.sleep(0.01)
            port.reset_input_buffer()
            drops = int(ask(port, codec, m.StatusRequest).get("drops"))
            assert drops > 0                              # and the board says so
    finally:
        s.close()


def test_virtual_clock_is_refused_on_a_pty():
    with pytest.raises(ValueError, match="virtual"):
        serve_pty(parse_sim_url("sim://wheel?clock=virtual"), on_ready=print)
    assert run_sim_server("sim://wheel?clock=virtual") == 2
    assert run_sim_server("sim://robot") == 2


def test_command_line_front_prints_path_links_and_stops_on_ctrl_c(tmp_path):
    link = tmp_path / "board"
    code = ("from rigbench.rig.pty import run_sim_server; "
            f"raise SystemExit(run_sim_server('wheel', {str(link)!r}))")
    proc = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "PYTHONPATH": str(ROOT)})
    try:
        first = proc.stdout.readline()
        assert "/dev/" in first and str(link) in first
        assert link.is_symlink()
        with serial.Serial(str(link), timeout=0.05) as port:
            assert ask(port, HostCodec(), m.Hello).get("rig") == "wheel"
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "stopped after" in out
    assert not link.exists() and not link.is_symlink()
