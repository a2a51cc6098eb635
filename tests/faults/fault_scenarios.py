"""Fault scenarios run against the simulated board, shared by tests/faults and
scripts/fault_table.py (which prints their figures as the table in docs/FAULTS.md).

Each scenario opens ``sim://balance?clock=virtual`` (one pty scenario runs in real time),
injects one fault, and returns an ``Outcome``: what the host showed (link state, health
counters, an experiment's stop reason), what the board truly sent against what the host
accepted, the motor state on the board itself at the end, and whether the recording made
up to the fault loads and is in order.

The truth comes from a tap on the board's transmit side (fault_truth.py: ``BoardTap``),
*before* the simulated line corrupts or drops anything: every telemetry row, status frame
and board event the host accepted is looked up there, and must be there with the same
values.

Helpers for tests only; imports bench (link, rig, recording, experiments) but is imported by
nothing in bench.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import serial
from fault_ports import MODEM_PROBE, ShapedPort
from fault_truth import BoardTap, Outcome, StateLog, compare, note_recording

from rigbench.experiments.runner import Experiment, Guards
from rigbench.link import BoardRefused, Link, LinkError, LinkLost
from rigbench.recordings.recording import Recorder, load_recording
from rigbench.rig.pty import serve_pty
from rigbench.rig.simlink import SimLink
from rigbench.rig.url import parse_sim_url

ROOT = Path(__file__).resolve().parents[2]
SIM = "sim://balance?clock=virtual&seed={seed}"
STREAM_HZ = 500.0
# link settings of the noisy-line rows above 0.3 % a byte (more resends, shorter waits)
NOISY_SETTINGS = {"retries": 40, "reply_timeout_s": 0.2}

def _open(url: str, *, wrap=None, **link_kw):
    port = serial.serial_for_url(url, timeout=0.01)
    tap = BoardTap(port.board)
    sim = port.link
    try:
        link = Link.attach(wrap(port) if wrap else port, url=url, **link_kw)
    except BaseException:
        port.close()
        raise
    return port, sim, tap, link


def _finish(out: Outcome, link: Link, sim: SimLink, tap: BoardTap, t0: float) -> Outcome:
    acc = compare(link, tap)
    h = link.health()
    out.sim_s = link.now() - t0
    out.link_state = link.state
    out.host_motor = link.motor_state
    out.line_bytes_hit = sim.counts.corrupted + sim.counts.dropped
    out.frames_sent = tap.sent
    out.frames_accepted = acc.rows
    out.lines_rejected = sum(v for k, v in h.bad_frames.items() if k != "kill_byte")
    out.accepted_wrong = acc.wrong + tap.ambiguous
    out.telemetry_lost = tap.sent - acc.rows
    out.host_counted_lost = h.lost_frames
    _, block = link.read_since(0)
    if len(block):                     # lost there, no gap can show it
        first, last = int(block.frame[0]), int(block.frame[-1])
        out.unseen_ends = sum(f < first or f > last for f, _ in tap.telemetry)
    out.resends = h.resends
    for e in link.events_since(0)[1]:
        kind = e.kind if e.source == "link" else (
            f"trip:{e.get('cause')}" if e.kind == "trip" else None)
        if kind and kind != "handshake" and (not out.host_events or out.host_events[-1] != kind):
            out.host_events.append(kind)
    out.motor_end = sim.board.motor
    out.fault_end = sim.board.fault
    return out


def _run_recorded(link: Link, rec: Recorder, seconds: float, log: StateLog,
                  step_s: float = 0.1) -> None:
    end = link.now() + seconds
    while link.now() < end:
        link.sleep(step_s)
        rec.poll()
        log()


# --------------------------------------------------------------------------- scenarios


def noisy_line(kind: str, rate: float, *, seconds: float = 3.0, seed: int = 11,
               workdir: Path) -> Outcome:
    """Corrupt (flip a bit) or drop bytes at ``rate`` per byte, both directions, while the
    rig balances in hold with telemetry recorded; then kill over the same line."""
    url = SIM.format(seed=seed) + f"&{kind}={rate:g}"
    what = "bit-flipped" if kind == "corrupt" else "lost"
    out = Outcome(f"{kind} {rate:g}/byte",
                  f"each byte {what} with probability {rate:g}, both directions",
                  damage="bit flips" if kind == "corrupt" else "bytes lost or inserted")
    # the CLI's defaults (Link.open) up to 0.3 % a byte; a line that damages most frames
    # needs more resends, and the table says so
    settings = NOISY_SETTINGS if rate > 0.003 else {}
    out.settings = ", ".join(f"{k}={v:g}" for k, v in settings.items()) or "defaults"
    port, sim, tap, link = _open(url, **settings)
    try:
        t0 = link.now()
        log = StateLog(link)
        link.arm()  # a lost reply is settled by asking status (Link._confirmed)
        link.mode("hold")
        path = workdir / f"{kind}-{rate:g}.csv"
        with Recorder(path, link, background=False) as rec:
            link.stream(STREAM_HZ)
            _run_recorded(link, rec, seconds, log)
            link.kill(framed=True)
            link.sleep(0.2)
        log()
        _finish(out, link, sim, tap, t0)
        out.states_seen = log.seen
        note_recording(out, path)
        out.recording_ok = out.recording_ok and out.recording_rows == out.frames_accepted
        return out
    finally:
        link.close()


def garbage_before_handshake(*, seconds: float = 2.0, seed: int = 12, workdir: Path) -> Outcome:
    """Modem probes, binary junk, bad frames and a frame cut short arrive before the
    board's first byte (a desktop probing a new USB serial device)."""
    url = SIM.format(seed=seed)
    out = Outcome("garbage before handshake", f"{len(MODEM_PROBE)} bytes of modem probes, "
                  "binary junk and broken frames before the board's first byte")
    port, sim, tap, link = _open(url, wrap=lambda p: ShapedPort(p, prefix=MODEM_PROBE))
    try:
        t0 = link.now()
        log = StateLog(link)
        path = workdir / "garbage.csv"
        with Recorder(path, link, background=False) as rec:
            link.stream(STREAM_HZ)
            _run_recorded(link, rec, seconds, log)
        _finish(out, link, sim, tap, t0)
        out.states_seen = log.seen
        note_recording(out, path)
        return out
    finally:
        link.close()


def partial_lines(*, seconds: float = 2.0, seed: int = 13, workdir: Path) -> Outcome:
    """Reads cut into pieces of 1..7 bytes, and on one read in 40 (at random) a cut-off
    frame start slipped in mid-stream: each breaks the frame it lands in."""
    url = SIM.format(seed=seed)
    shaped = []

    def wrap(p):
        shaped.append(ShapedPort(p, max_piece=7, glitch_every=40, seed=seed))
        return shaped[0]

    port, sim, tap, link = _open(url, wrap=wrap)
    out = Outcome("partial lines", "reads of 1..7 bytes; a cut-off frame start on 1 read in 40",
                  damage="bytes lost or inserted")
    try:
        t0 = link.now()
        log = StateLog(link)
        path = workdir / "partial.csv"
        with Recorder(path, link, background=False) as rec:
            link.stream(200.0)
            _run_recorded(link, rec, seconds, log)
        _finish(out, link, sim, tap, t0)
        out.states_seen = log.seen
        out.notes = f"{shaped[0].glitches} cut-off frames slipped in"
        note_recording(out, path)
        return out
    finally:
        link.close()


def _experiment(out: Outcome, url: str, workdir: Path, seconds: float,
                *, fault_s: float | None, after=None) -> Outcome:
    """Balance in hold inside an Experiment (guards, recording) until the fault stops it."""
    port, sim, tap, link = _open(url)
    try:
        t0 = link.now()
        log = StateLog(link)
        with Experiment(link, name=out.scenario, results_dir=workdir, stream_hz=STREAM_HZ,
                        guards=Guards(stale_s=0.5)) as exp:
            exp.hold()
            exp.wait(seconds, until=log)
        log()
        if after is not None:
            after(link, sim, log)
        _finish(out, link, sim, tap, t0)
        out.states_seen = log.seen
        out.stopped_by = exp.result.stopped_by
        if exp.result.recording is not None:
            note_recording(out, exp.result.recording, fault_s)
        return out
    finally:
        link.close()


def _run_on(link: Link, sim: SimLink, log: StateLog, seconds: float = 2.0) -> None:
    try:
        end = link.now() + seconds
        while link.now() < end:
            link.sleep(0.1)
            log()
    except LinkError:
        log()


def stall(*, seed: int = 14, workdir: Path) -> Outcome:
    """The board's firmware stops for 1.5 s mid-experiment (plant runs on, nothing sent)."""
    url = SIM.format(seed=seed) + "&stall=3:1.5"
    out = Outcome("stall mid-experiment", "firmware stops 1.5 s at t = 3 s (watchdog 0.5 s); "
                  "the motor keeps its last command until the firmware runs again and its "
                  "watchdog trips")
    return _experiment(out, url, workdir, 6.0, fault_s=3.0,
                       after=lambda link, sim, log: _run_on(link, sim, log))


def reset_mid_experiment(*, seed: int = 15, workdir: Path) -> Outcome:
    """The board reboots at t = 3 s while balancing in hold inside an experiment."""
    url = SIM.format(seed=seed) + "&reset=3"
    out = Outcome("board reset mid-experiment", "board reboots at t = 3 s")
    return _experiment(out, url, workdir, 6.0, fault_s=3.0,
                       after=lambda link, sim, log: _run_on(link, sim, log))


def _board_alone(sim: SimLink, seconds: float = 1.0) -> None:
    """The cable is gone but the board keeps power: its firmware runs on with no host."""
    for _ in range(round(seconds / sim.board.dt_s)):
        sim.board.step()               # its output goes nowhere (and is not counted as sent)


def unplug_mid_experiment(*, seed: int = 16, workdir: Path) -> Outcome:
    """The USB cable is pulled at t = 3 s while balancing inside an experiment; the board,
    still powered, runs on without a host."""
    url = SIM.format(seed=seed) + "&unplug=3"
    out = Outcome("unplug mid-experiment", "port vanishes at t = 3 s; the test steps the "
                  "board on alone for 1 s (a separately powered board; `unplug=` alone stops "
                  "a virtual-clock board with its port)")
    return _experiment(out, url, workdir, 6.0, fault_s=3.0,
                       after=lambda link, sim, log: _board_alone(sim))


def unplug_mid_recording(*, seed: int = 17, workdir: Path) -> Outcome:
    """The cable is pulled at t = 2.5 s while a recording runs (motor armed, no experiment)."""
    url = SIM.format(seed=seed) + "&unplug=2.5"
    out = Outcome("unplug mid-recording", "port vanishes at t = 2.5 s while recording (armed)")
    port, sim, tap, link = _open(url)
    try:
        t0 = link.now()
        log = StateLog(link)
        link.arm()
        link.stream(STREAM_HZ)
        path = workdir / "unplug.csv"
        rec = Recorder(path, link, background=False).start()
        try:
            _run_recorded(link, rec, 5.0, log)
        except LinkLost:
            log()
        rec.close()
        _board_alone(sim)
        _finish(out, link, sim, tap, t0)
        out.states_seen = log.seen
        note_recording(out, path, 2.5)
        return out
    finally:
        link.close()


def host_stops(*, seed: int = 18, workdir: Path) -> Outcome:
    """The host dies while the rig balances (no kill, no disarm, no more heartbeats) and its
    recorder is never closed; the board runs on."""
    url = SIM.format(seed=seed)
    out = Outcome("host dies (virtual clock)", "host threads stop mid-run, recorder never closed")
    port, sim, tap, link = _open(url)
    t0 = link.now()
    log = StateLog(link)
    link.arm()
    link.mode("hold")
    link.stream(STREAM_HZ)
    path = workdir / "host-dies.csv"
    rec = Recorder(path, link, background=False, flush_s=1e-3).start()
    _run_recorded(link, rec, 2.0, log)
    died_s = sim.board.time_s
    link.channel.close()  # the host is gone: nothing more is read or written
    _finish(out, link, sim, tap, t0)
    for _ in range(round(1.0 / sim.board.dt_s)):   # the board runs on, nobody reads
        sim.advance()
        sim.drain()
    out.motor_end, out.fault_end = sim.board.motor, sim.board.fault
    out.states_seen = log.seen
    out.link_state = "host gone"
    note_recording(out, path, died_s)
    out.notes = f"recording complete flag: {load_recording(path).complete}"
    link.close()
    return out


def heartbeat_every(period_s: float, *, seconds: float = 3.0, seed: int = 19) -> Outcome:
    """The host's heartbeat comes every ``period_s`` (the board's watchdog is 0.5 s)."""
    url = SIM.format(seed=seed)
    out = Outcome(f"heartbeat every {period_s:g} s", f"host heartbeat period {period_s:g} s, "
                  "board watchdog 0.5 s")
    port, sim, tap, link = _open(url, heartbeat_s=period_s)
    try:
        t0 = link.now()
        log = StateLog(link)
        refusals = 0
        for _ in range(20):    # arming needs a fresh heartbeat: it may be refused
            try:
                link.arm()
                break
            except BoardRefused as exc:   # interlock: heartbeat not fresh
                if exc.code != "interlock":
                    raise
                refusals += 1
                link.sleep(0.1)
        link.mode("hold")
        link.stream(100.0)
        _run_on(link, sim, log, seconds)
        trips = [e.get("cause") for e in link.events_since(0)[1] if e.kind == "trip"]
        out.notes = f"arm refused {refusals}x; trips seen by host: {trips or 'none'}"
        _finish(out, link, sim, tap, t0)
        out.states_seen = log.seen
        if sim.board.motor == "running":   # a healthy heartbeat: leave the rig safe
            link.disarm()
            out.motor_end, out.fault_end = sim.board.motor, sim.board.fault
        return out
    finally:
        link.close()


# --------------------------------------------------------------------------- real time


_HOST = """
import sys, time
from rigbench.link import Link
link = Link.open(sys.argv[1])
link.arm()
link.mode("hold")
link.stream(100)
print("running", flush=True)
time.sleep(60)
"""


def host_killed_on_pty(*, timeout_s: float = 20.0) -> Outcome:
    """A host process on a pty-served board (real time) is SIGKILLed while the motor runs;
    the board's watchdog must turn the motor off."""
    out = Outcome("host process SIGKILLed", "host on a pty killed (SIGKILL) while running; "
                  "real time")
    options = parse_sim_url("sim://wheel")
    sim = SimLink(options)
    ready, stop = threading.Event(), threading.Event()
    where: dict = {}

    def on_ready(path):
        where["path"] = path
        ready.set()

    server = threading.Thread(target=serve_pty, args=(options,), daemon=True,
                              kwargs=dict(on_ready=on_ready, stop=stop, link=sim))
    server.start()
    proc = None
    try:
        if not ready.wait(10):
            raise AssertionError("pty server did not start")
        proc = subprocess.Popen([sys.executable, "-c", _HOST, where["path"]], cwd=ROOT,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                env={**os.environ, "PYTHONPATH": str(ROOT)})
        line = proc.stdout.readline()
        if line.strip() != "running":
            raise AssertionError(f"host did not start: {line!r} {proc.stderr.read()[-500:]}")
        running_before = sim.board.motor
        killed_at = time.monotonic()
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
        deadline = killed_at + timeout_s
        while sim.board.motor == "running" and time.monotonic() < deadline:
            time.sleep(0.01)
        out.sim_s = time.monotonic() - killed_at
        out.motor_end, out.fault_end = sim.board.motor, sim.board.fault
        out.link_state = "host gone"
        out.notes = (f"motor {running_before} before the kill; {out.motor_end} "
                     f"{out.sim_s:.2f} s after it")
        return out
    finally:
        if proc is not None and proc.poll() is None:
            proc.kill()
            proc.wait(10)
        stop.set()
        server.join(10)


# --------------------------------------------------------------------------- the whole set

NOISE_RATES = (1e-4, 1e-3, 1e-2)


def all_scenarios(workdir: Path | None = None, *, pty: bool = True):
    """Every scenario in table order: (name, function taking no arguments)."""
    work = Path(tempfile.mkdtemp(prefix="rigbench-faults-")) if workdir is None else workdir
    items = []
    for kind in ("corrupt", "drop"):
        for rate in NOISE_RATES:
            items.append((f"{kind} {rate:g}",
                          lambda kind=kind, rate=rate: noisy_line(kind, rate, workdir=work)))
    items += [
        ("garbage", lambda: garbage_before_handshake(workdir=work)),
        ("partial", lambda: partial_lines(workdir=work)),
        ("stall", lambda: stall(workdir=work)),
        ("reset", lambda: reset_mid_experiment(workdir=work)),
        ("unplug experiment", lambda: unplug_mid_experiment(workdir=work)),
        ("unplug recording", lambda: unplug_mid_recording(workdir=work)),
        ("host dies", lambda: host_stops(workdir=work)),
        ("heartbeat 0.4", lambda: heartbeat_every(0.4)),
        ("heartbeat 0.7", lambda: heartbeat_every(0.7)),
    ]
    if pty and hasattr(os, "openpty"):
        items.append(("host killed", host_killed_on_pty))
    return items
