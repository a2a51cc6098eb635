"""The host drives the C board library like any board: through a real pseudo-terminal.

Every test runs twice, against the Python simulated board (``rigbench sim``) and against
the C library's host build (``rb-sim``, built with AddressSanitizer and
UndefinedBehaviorSanitizer), both on the same plant K/(T s + 1)^3, K = 1, T = 0.1 s: the
host's `info`, a relay autotune, pushing a profile and reading it back (and from storage
after a restart), the kill byte and the watchdog. The two may differ only in their identity
words. Boards run in wall time (a pty has no virtual clock), so these tests take seconds.
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import serial
import yaml

from rigbench.link.link import Link
from rigbench.rig.firmware.boards import rig_def
from rigbench.wire import HostCodec
from rigbench.wire import messages as m
from cbuild import built

pytestmark = pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs POSIX ptys")

TAU_S = 0.1
PY_URL = "sim://plant?den=0.001,0.03,0.3,1"            # (0.1 s + 1)^3


class Board:
    """A board process serving a pty; ``path`` is its device."""

    def __init__(self, kind: str, state: Path | None = None) -> None:
        self.kind = kind
        if kind == "c":
            cmd = [str(built().sim_sanitized), "--tau", str(TAU_S)]
            if state is not None:
                cmd += ["--state", str(state)]
        else:
            url = PY_URL + (f"&state={state}" if state is not None else "")
            cmd = [sys.executable, "-m", "rigbench", "sim", url]
        env = dict(os.environ, ASAN_OPTIONS="abort_on_error=0:exitcode=86",
                   UBSAN_OPTIONS="print_stacktrace=1:halt_on_error=1:exitcode=87")
        self.proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                     text=True, env=env)
        line = self.proc.stdout.readline()
        assert line, self.proc.stderr.read()
        self.path = line.split(" on ")[-1].split()[0] if " on " in line else line.strip()
        assert self.path.startswith("/dev/"), line

    def stop(self) -> str:
        self.proc.send_signal(signal.SIGTERM)
        try:
            _, err = self.proc.communicate(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            _, err = self.proc.communicate()
        assert self.proc.returncode == 0, err      # 86/87: a sanitizer found an error
        assert "Sanitizer" not in err and "runtime error" not in err, err
        return err


@pytest.fixture(params=["python", "c"])
def kind(request):
    built()                                         # a build error fails here, once
    return request.param


@pytest.fixture
def board(kind):
    b = Board(kind)
    yield b
    b.stop()


def rigbench(*args: str, timeout: float = 120.0) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "rigbench", *args], capture_output=True,
                          text=True, timeout=timeout)


def test_info_declares_what_the_simulated_plant_board_declares(board):
    proc = rigbench("info", "--port", board.path, "--json")
    assert proc.returncode == 0, proc.stderr
    info = json.loads(proc.stdout)
    want = rig_def("plant")
    assert info["board"]["board"] == ("sim-plant-1" if board.kind == "python" else "c-plant-1")
    assert info["board"]["rate_hz"] == 500 and info["board"]["simulated"] is True
    assert list(info["params"]) == [p.name for p in want.params]
    for p in want.params:
        got = info["params"][p.name]
        assert (got["unit"], got["min"], got["max"], got["value"], got["writable"]) == \
            (p.unit, p.minimum, p.maximum, p.default, p.writable)
    text = json.dumps(info["loops"], sort_keys=True)
    assert '"action": "reverse"' in text and '"setpoint": "r"' in text


def test_relay_autotune_finds_the_ultimate_point_of_the_plant(board):
    proc = rigbench("tune", "--port", board.path, "--loop", "main", "--json")
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    assert out["converged"] and out["board"].endswith("plant-1")
    # Analytic: K/(T s+1)^3 crosses -180° where 3·atan(ωT) + ω·L = π. The board measures
    # at the end of a period and its command is held over the next one: a zero-order hold,
    # about half a period of delay, L = 0.5/500 s (common practice, no source):
    # ω = 17.1 rad/s, Tu = 0.367 s, Ku = (1 + (ωT)²)^1.5 = 7.8.
    L = 0.5 / 500
    w = _solve(lambda w: 3 * math.atan(w * TAU_S) + w * L - math.pi, 10.0, 30.0)
    tu, ku = 2 * math.pi / w, (1 + (w * TAU_S) ** 2) ** 1.5
    assert out["tu_s"] == pytest.approx(tu, rel=0.03)
    # the describing function of a relay with hysteresis in noise: within 10 %
    # (Åström & Hägglund 1984, Automatic tuning of simple regulators with specifications
    # on phase and amplitude margins)
    assert out["ultimate"]["ku"] == pytest.approx(ku, rel=0.10)
    assert out["proposals"], "no gain proposals"


def _solve(f, lo, hi):
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if f(lo) * f(mid) > 0 else (lo, mid)
    return 0.5 * (lo + hi)


def test_push_reads_back_and_persists_across_a_restart(kind, tmp_path):
    state = tmp_path / "nv.bin"
    b = Board(kind, state=state)
    try:
        pulled = tmp_path / "pulled.yaml"
        proc = rigbench("pull", "-o", str(pulled), "--loop", "main", "--port", b.path)
        assert proc.returncode == 0, proc.stderr
        doc = yaml.safe_load(pulled.read_text())
        doc["gains"]["main_kp"]["value"] = 1.25
        doc["gains"]["main_ki"]["value"] = 0.75
        doc["gains"]["main_kd"]["value"] = 0.0125
        chosen = tmp_path / "chosen.yaml"
        chosen.write_text(yaml.safe_dump(doc, sort_keys=False))
        proc = rigbench("push", str(chosen), "--persist", "--json", "--port", b.path)
        assert proc.returncode == 0, proc.stdout + proc.stderr
        out = json.loads(proc.stdout)
        assert out["ok"] and out["mismatches"] == [] and out["readback"]["main_kp"] == 1.25
        assert out["saved"]["verified"] and out["saved"]["crc"] == out["saved"]["host_crc"]
    finally:
        b.stop()
    b = Board(kind, state=state)                    # boots with the stored values
    try:
        again = tmp_path / "again.yaml"
        proc = rigbench("pull", "-o", str(again), "--loop", "main", "--port", b.path)
        assert proc.returncode == 0, proc.stderr
        gains = yaml.safe_load(again.read_text())["gains"]
        assert [gains[g]["value"] for g in ("main_kp", "main_ki", "main_kd")] == \
            [1.25, 0.75, 0.0125]
    finally:
        b.stop()


def test_the_kill_byte_trips_a_running_board(board):
    link = Link.open(board.path)
    try:
        assert link.arm() == "armed"
        link.mode("hold")
        link.set(main_sp=1.0)
        assert link.wait_until(lambda: link.motor_state == "running", 2.0)
        cursor = link.event_cursor()
        link.kill()
        assert link.wait_until(lambda: link.motor_state == "tripped", 2.0)
        assert link.status().fault == "kill"
        _, events = link.events_since(cursor)
        assert any(e.source == "board" and e.kind == "trip" and e.get("cause") == "kill"
                   for e in events)
    finally:
        link.close()


def _ask(port, codec, cls, *args):
    msg, frame = codec.command(cls, *args)
    port.write(frame)
    deadline = time.monotonic() + 2.0
    while time.monotonic() < deadline:
        for x in codec.receive(port.read(port.in_waiting or 1)):
            if isinstance(x, (m.Ok, m.Err)) and x.seq == msg.seq:
                return x
    raise AssertionError(f"no reply to {cls.VERB}")


def test_the_watchdog_trips_when_the_heartbeat_stops(board):
    with serial.Serial(board.path, timeout=0.02) as port:
        codec = HostCodec()
        assert isinstance(_ask(port, codec, m.Hello), m.Ok)
        port.write(codec.encode(m.Heartbeat()))
        assert _ask(port, codec, m.Arm).get("motor") == "armed"
        assert _ask(port, codec, m.Mode, "hold", ()).get("mode") == "hold"
        t0 = time.monotonic()
        seen = []
        while time.monotonic() - t0 < 1.2:          # silence: no heartbeat (500 ms timeout)
            seen += codec.receive(port.read(port.in_waiting or 1))
        status = _ask(port, codec, m.StatusRequest)
    assert status.get("motor") == "tripped" and status.get("fault") == "watchdog"
    trips = [x for x in seen if isinstance(x, m.Event) and x.kind == "trip"]
    assert [dict(x.fields).get("cause") for x in trips] == ["watchdog"]


def test_a_restarted_host_gets_back_into_a_tripped_board(board):
    # PROTOCOL.md §4.2: a hello is never a resend. A host says hello, the board trips, a
    # new host sends the same first bytes (its numbering restarts at 1): it is answered.
    with serial.Serial(board.path, timeout=0.02) as port:
        codec = HostCodec()
        assert isinstance(_ask(port, codec, m.Hello), m.Ok)
        port.write(b"\x18\x18\x18")
        seen, deadline = [], time.monotonic() + 2.0
        while time.monotonic() < deadline and not any(
                isinstance(x, m.Event) and x.kind == "trip" for x in seen):
            seen += codec.receive(port.read(port.in_waiting or 1))
        assert any(isinstance(x, m.Event) and x.kind == "trip" for x in seen)
    proc = rigbench("info", "--port", board.path, "--json")
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout)["board"]["board"].endswith("plant-1")


@pytest.fixture
def py_board():
    """The Python board only: for host-side behaviour that does not depend on the board."""
    b = Board("python")
    yield b
    b.stop()


def test_clear_after_a_kill_lets_tune_run_again_and_never_starts_the_motor(py_board):
    board = py_board
    assert rigbench("kill", "--port", board.path).returncode == 0
    proc = rigbench("tune", "--port", board.path, "--loop", "main")
    assert proc.returncode == 4 and "rigbench clear" in proc.stderr, proc.stderr
    proc = rigbench("clear", "--port", board.path, "--json")
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    assert out["cleared"] and out["fault_was"] == "kill" and out["motor"] == "off"
    proc = rigbench("clear", "--port", board.path)
    assert proc.returncode == 0 and "no fault latched" in proc.stdout


def _start_tune(board) -> subprocess.Popen:
    """`rigbench tune` on the board in the background, once it holds the port and has
    had time to arm (its quiet hold runs for seconds before the relay)."""
    from rigbench.link.killsock import request_kill, socket_path

    proc = subprocess.Popen([sys.executable, "-m", "rigbench", "tune", "--port", board.path,
                             "--loop", "main", "--json"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 20.0
    while request_kill(str(socket_path(board.path)), probe=True, timeout_s=0.5) is None:
        assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
        time.sleep(0.05)
    time.sleep(1.0)
    assert proc.poll() is None, proc.communicate()
    return proc


def _board_status(board) -> dict:
    proc = rigbench("info", "--port", board.path, "--json", "--listen", "0.3")
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)["status"]


def test_rigbench_kill_from_a_second_process_stops_a_running_tune(board):
    tune = _start_tune(board)
    try:
        proc = rigbench("kill", "--port", board.path, "--json", timeout=20)
    finally:
        _, err = tune.communicate(timeout=30)
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    assert out["confirmed"] and out["via"].startswith("process ") and not out["escalated"]
    # the board's trip time stamp (its clock mapped onto the holder's by the telemetry)
    # within 50 ms of the holder writing the kill bytes (PROTOCOL.md §7.1); the figure
    # over many runs is scripts/bench_kill.py's
    assert out["latency_board_s"] is not None and out["latency_board_s"] < 0.05
    assert tune.returncode not in (0, 1), err        # stopped by the trip, not a crash
    st = _board_status(board)
    assert st["motor"] == "tripped" and st["fault"] == "kill"


def test_sigint_stops_a_running_tune_with_the_kill(py_board):
    board = py_board
    tune = _start_tune(board)
    tune.send_signal(signal.SIGINT)
    _, err = tune.communicate(timeout=30)
    assert tune.returncode == 130, err
    st = _board_status(board)
    assert st["motor"] == "tripped" and st["fault"] == "kill"


def test_rigbench_kill_says_so_when_the_port_is_held_by_a_program_that_does_not_answer(
        py_board):
    board = py_board
    with serial.Serial(board.path, exclusive=True):   # holds the port, no kill socket
        proc = rigbench("kill", "--port", board.path, timeout=20)
    assert proc.returncode == 3
    assert "busy" in proc.stderr and "cut" in proc.stderr and "power" in proc.stderr
