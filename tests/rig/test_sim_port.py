"""``sim://`` through ``serial.serial_for_url``: both clocks, the kill byte through the
port, fault injection (corrupted and dropped bytes, stall, reset, unplug), determinism,
and the virtual clock on its own. Whole experiments use the virtual clock."""

import threading

import pytest
import serial

from rigbench.rig.clock import ClockStalled, VirtualClock
from rigbench.wire import HostCodec
from rigbench.wire import messages as m


class PortHost:
    """A minimal host on a port: codec, heartbeat every 0.1 s of port-clock time."""

    def __init__(self, url: str, **kw) -> None:
        self.port = serial.serial_for_url(url, timeout=0.05, **kw)
        self.codec = HostCodec()
        self.msgs: list = []
        self.raw = bytearray()
        self._next_hb = 0.0

    def close(self):
        self.port.close()

    def read_for(self, seconds: float, hb: bool = True) -> list:
        clock = self.port.clock
        t_end = clock.now() + seconds
        got = []
        while clock.now() < t_end:
            if hb and clock.now() >= self._next_hb:
                self.port.write(self.codec.encode(m.Heartbeat()))
                self._next_hb = clock.now() + 0.1
            data = self.port.read(self.port.in_waiting or 1)
            self.raw += data
            got += self.codec.receive(data)
        self.msgs += got
        return got

    def ask(self, cls, *args, limit_s: float = 2.0):
        msg, frame = self.codec.command(cls, *args)
        self.port.write(frame)
        clock = self.port.clock
        t_end = clock.now() + limit_s
        while clock.now() < t_end:
            for x in self.codec.receive(self.port.read(self.port.in_waiting or 1)):
                self.msgs.append(x)
                if isinstance(x, (m.Ok, m.Err)) and x.seq == msg.seq:
                    return x
        raise AssertionError(f"no reply to {cls.VERB}")


@pytest.mark.parametrize("clock", ["virtual", "real"])
def test_serial_for_url_with_each_clock(clock):
    h = PortHost(f"sim://wheel?clock={clock}")
    try:
        assert h.port.clock.virtual is (clock == "virtual")
        assert h.port.board.rig.rig == "wheel"
        reply = h.ask(m.Hello)
        assert reply.get("board") == "sim-wheel-1" and reply.get("sim") == "1"
        assert h.ask(m.Stream, 100.0).get("rate_hz") == "100"
        got = h.read_for(0.2)
        assert sum(isinstance(x, m.Telemetry) for x in got) >= 5
        assert h.codec.bad_frames == 0
    finally:
        h.close()
    assert not h.port.is_open


def test_bad_url_is_a_serial_exception():
    with pytest.raises(serial.SerialException, match="seed"):
        serial.serial_for_url("sim://balance?seed=x")


def test_virtual_read_returns_whole_experiment_without_drops():
    h = PortHost("sim://balance?clock=virtual&seed=2")
    h.ask(m.Stream, 500.0)
    h.read_for(0.2)
    assert isinstance(h.ask(m.Arm), m.Ok)
    h.ask(m.Mode, "hold")
    got = h.read_for(5.0)
    tm = [x for x in got if isinstance(x, m.Telemetry)]
    frames = [t.frame for t in tm]
    assert frames == list(range(frames[0], frames[0] + len(frames)))   # nothing lost
    assert len(tm) >= 2495
    assert h.port.board.drops == 0 and h.port.board.motor == "running"
    assert h.port.clock.now() == pytest.approx(h.port.board.time_s)


def test_kill_through_the_port_acts_before_the_next_period():
    h = PortHost("sim://balance?clock=virtual&drive=torque")
    h.read_for(0.2)
    assert isinstance(h.ask(m.Arm), m.Ok)
    h.ask(m.Mode, "hold")
    h.read_for(1.0)
    t = h.port.board.time_s
    h.port.write(HostCodec.kill_bytes())
    assert h.port.board.motor == "tripped" and h.port.board.time_s == t
    got = h.read_for(0.01)
    assert [e.get("cause") for e in got if isinstance(e, m.Event) and e.kind == "trip"] \
        == ["kill"]


def test_same_seed_same_bytes():
    streams = []
    for _ in range(2):
        h = PortHost("sim://balance?clock=virtual&seed=11&corrupt=0.001")
        h.ask(m.Stream, 250.0)
        h.read_for(1.0)
        streams.append(bytes(h.raw))
    assert streams[0] == streams[1] and len(streams[0]) > 10000


@pytest.mark.parametrize("fault", ["corrupt=0.002", "drop=0.002"])
def test_noisy_line_shows_as_rejected_frames(fault):
    h = PortHost(f"sim://wheel?clock=virtual&{fault}")
    frame = h.codec.encode(m.Stream(9, 500.0))
    for _ in range(5):                     # the command itself may be hit: resend (§4.2)
        h.port.write(frame)
        if any(isinstance(x, m.Telemetry) for x in h.read_for(0.2)):
            break
    h.read_for(4.0)
    counts = h.port.link.counts
    assert counts.corrupted + counts.dropped > 0
    good = sum(isinstance(x, m.Telemetry) for x in h.msgs)
    assert good > 1000 and h.codec.bad_frames > 0
    # host -> board too: the board counts frames it could not read
    for _ in range(300):
        h.port.write(h.codec.encode(m.Heartbeat()))
    assert h.port.board.rx_err > 0


def test_reset_emits_boot_and_restarts_the_board_clock():
    h = PortHost("sim://wheel?clock=virtual&reset=1.0")
    h.ask(m.Stream, 10.0)
    got = h.read_for(2.0)
    boots = [x for x in got if isinstance(x, m.Event) and x.kind == "boot"]
    assert [b.get("reason") for b in boots] == ["reset"]
    assert boots[0].time_us == 0
    assert h.port.board.stream_div == 0                  # live settings were lost


def test_stall_stops_output_then_resumes():
    h = PortHost("sim://wheel?clock=virtual&stall=1.0:0.5")
    h.ask(m.Stream, 100.0)
    got = h.read_for(2.5, hb=False)
    tm = [x for x in got if isinstance(x, m.Telemetry)]
    gaps = [(b.time_us - a.time_us) / 1e6 for a, b in zip(tm, tm[1:])]
    assert max(gaps) == pytest.approx(0.51, abs=0.011)   # 0.5 s of silence
    assert [t.frame for t in tm] == list(range(tm[0].frame, tm[0].frame + len(tm)))


def test_stall_while_running_trips_the_watchdog_afterwards():
    h = PortHost("sim://wheel?clock=virtual&stall=1.0:0.7")
    h.read_for(0.2)
    assert isinstance(h.ask(m.Arm), m.Ok)
    h.ask(m.Mode, "hold")
    got = h.read_for(2.0)
    trips = [x.get("cause") for x in got if isinstance(x, m.Event) and x.kind == "trip"]
    assert trips == ["watchdog"]


def test_unplug_raises_like_a_vanished_device():
    h = PortHost("sim://wheel?clock=virtual&unplug=0.5")
    with pytest.raises(serial.SerialException):
        h.read_for(2.0)
    assert h.port.clock.now() == pytest.approx(0.5, abs=0.003)
    with pytest.raises(serial.SerialException):
        h.port.write(b"@hb|D368\n")
    with pytest.raises(OSError):
        h.port.in_waiting


def test_unplug_with_the_real_clock():
    h = PortHost("sim://wheel?unplug=0.1")
    try:
        with pytest.raises(serial.SerialException):
            h.read_for(5.0)
    finally:
        h.close()


def test_virtual_clock_sleep_is_woken_by_simulated_time():
    clock = VirtualClock()
    woke = []

    def sleeper():
        clock.sleep(0.1)
        woke.append(clock.now())

    th = threading.Thread(target=sleeper)
    th.start()
    while clock.next_deadline() is None:
        threading.Event().wait(0.001)
    t = 0.0
    while th.is_alive():
        t += 0.002
        clock.advance_to(t)
    assert woke and 0.1 <= woke[0] < 0.1 + 0.0021     # woken before time ran on


def test_virtual_clock_guard_raises_instead_of_hanging():
    clock = VirtualClock(stall_guard_s=0.2)
    with pytest.raises(ClockStalled, match="nothing is reading"):
        clock.sleep(1.0)


def test_heartbeat_thread_sleeping_on_the_virtual_clock_keeps_the_board_armed():
    """A host whose heartbeat comes from its own thread sleeping on ``port.clock``: simulated
    time waits for the woken thread, so the watchdog never sees a gap (PROTOCOL.md §7.2)."""
    h = PortHost("sim://wheel?clock=virtual")
    stop = threading.Event()

    def beat():
        while not stop.is_set():
            h.port.write(h.codec.encode(m.Heartbeat()))
            h.port.clock.sleep(0.1)

    th = threading.Thread(target=beat, daemon=True)
    th.start()
    try:
        h.read_for(0.3, hb=False)
        assert isinstance(h.ask(m.Arm), m.Ok)
        h.ask(m.Mode, "hold")
        got = h.read_for(10.0, hb=False)
    finally:
        stop.set()
        h.read_for(0.2, hb=False)          # let the sleeper wake and see the stop
        th.join(5)
    assert not [x for x in got if isinstance(x, m.Event) and x.kind == "trip"]
    assert h.port.board.motor == "running"
