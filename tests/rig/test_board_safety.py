"""Safety behaviour of the simulated board (PROTOCOL.md §7): watchdog, kill byte, the
motor-off interlock and its reasons, clear never restarts, trip limits, relay bound, and
the state table of rigbench.wire.states as seen from the host.

The torque-drive balance rig is used where "motor off" must be seen physically: with a
torque drive, a zero command is zero motor torque (plant truth).
"""

import sys
from pathlib import Path

import pytest

from rigbench.rig.firmware.board import make_board
from rigbench.wire import messages as m
from rigbench.wire.crc import crc16

sys.path.insert(0, str(Path(__file__).parent))
from sim_host import Host  # noqa: E402


def torque_host(**kw) -> Host:
    return Host(make_board("balance", drive="torque", seed=5, **kw))


def running_torque_host() -> Host:
    h = torque_host()
    assert h.start("hold").get("mode") == "hold"
    h.run(1.0)
    assert h.board.motor == "running"
    assert abs(h.board.plant.truth()["torque_Nm"]) > 0.0
    return h


def test_watchdog_trips_within_one_period_of_its_timeout():
    h = running_torque_host()
    b = h.board
    last_hb = b.last_hb_s
    h.hb_every_s = None                                  # the host goes quiet
    msgs = h.run(1.0)
    trips = h.events(msgs, "trip")
    assert [t.get("cause") for t in trips] == ["watchdog"]
    t_trip = trips[0].time_us / 1e6
    # PROTOCOL.md §7.2: a gap longer than watchdog_ms trips within one loop period
    assert b.watchdog_s < t_trip - last_hb <= b.watchdog_s + b.dt_s + 1e-9
    assert b.motor == "tripped" and b.fault == "watchdog"
    assert b.plant.truth()["torque_Nm"] == 0.0
    st = h.ask(m.StatusRequest)
    assert (st.get("motor"), st.get("fault"), st.get("mode")) == ("tripped", "watchdog", "off")


def test_kill_byte_mid_line_acts_at_once_and_discards_the_frame():
    h = running_torque_host()
    b = h.board
    body = b"set 77 tilt_kp=0.5"
    frame = b"@%s|%04X\n" % (body, crc16(body))
    b.receive(frame[:9])                                  # half a frame...
    b.receive(b"\x18" + frame[9:])                        # ...the kill, then the rest
    got = h.pump()
    assert [e.get("cause") for e in h.events(got, "trip")] == ["kill"]  # before any step
    assert b.motor == "tripped"
    assert not [x for x in got if isinstance(x, (m.Ok, m.Err))]         # frame discarded
    b.step()                                              # the next loop period: no torque
    assert b.plant.truth()["torque_Nm"] == 0.0
    assert h.ask(m.Get, ("tilt_kp",)).get("tilt_kp") == "0.078"
    # the host sends it three times: still one trip
    b.receive(b"\x18\x18\x18")
    assert h.events(h.pump(), "trip") == []


def test_arm_refused_without_heartbeat():
    h = torque_host()
    h.hb_every_s = None
    h.run(0.2)
    reply = h.ask(m.Arm)
    assert (reply.code, reply.text) == ("interlock", "heartbeat")
    assert h.board.motor == "off"


def test_arm_refused_with_tilt_outside_window():
    h = torque_host()
    h.board.hand_tilt_deg = 5.0                           # held leaning, arm_tilt is 3 deg
    h.run(2.0)
    reply = h.ask(m.Arm)
    assert (reply.code, reply.text) == ("interlock", "tilt")
    assert h.ask(m.StatusRequest).get("why") == "tilt"
    h.board.hand_tilt_deg = 0.0
    h.run(2.0)
    assert isinstance(h.ask(m.Arm), m.Ok)


def test_arm_refused_with_wheel_spinning():
    h = torque_host()
    h.run(0.2)
    h.board.plant.set_state(wheel_rad_s=30.0)            # about 4.8 rev/s, arm_wheel is 1
    h.run(0.01)
    reply = h.ask(m.Arm)
    assert (reply.code, reply.text) == ("interlock", "wheel")


def test_arm_refused_with_fault_latched_and_gains_out_of_range():
    h = torque_host()
    h.run(0.2)
    h.ask(m.Kill)
    reply = h.ask(m.Arm)
    assert (reply.code, reply.text) == ("interlock", "fault")
    h.ask(m.Clear)
    h.board.params.values["tilt_ki"] = 50.0               # as from a corrupted store
    reply = h.ask(m.Arm)
    assert (reply.code, reply.text) == ("interlock", "gains")
    h.hb_every_s = None
    h.run(1.0)
    assert h.ask(m.Arm).text == "heartbeat,gains"        # all failing conditions, in order


def test_clear_never_restarts_the_motor():
    h = running_torque_host()
    h.ask(m.Stream, 50.0)
    h.ask(m.Kill)
    reply = h.ask(m.Clear)
    assert reply.get("motor") == "off"
    assert [e.kind for e in h.events()][-3:] == ["trip", "mode", "clear"]
    msgs = h.run(1.0)
    assert h.board.motor == "off" and h.board.mode.name == "off"
    cmd = h.column(msgs, "cmd")
    assert len(cmd) == 50 and not cmd.any()
    assert h.ask(m.Mode, "hold").code == "not_armed"
    assert h.ask(m.Arm).text == "wheel"                  # the wheel still coasts
    h.board.plant.set_state(wheel_rad_s=0.0)              # stopped by hand
    h.run(0.05)
    assert isinstance(h.ask(m.Arm), m.Ok)                 # arming needs a new arm


def test_state_table_refusals():
    h = torque_host()
    assert h.ask(m.Mode, "hold").code == "not_armed"      # off
    h.run(0.2)
    h.ask(m.Arm)
    assert h.ask(m.Mode, "inject", (("loop", "tilt"), ("at", "setpoint"), ("amp", "1"),
                                    ("time_s", "1"))).code == "state"    # inject needs hold
    h.ask(m.Mode, "hold")
    assert h.ask(m.Arm).code == "state"                   # running
    assert h.ask(m.Disarm).get("motor") == "off"
    assert h.board.mode.name == "off"
    h.ask(m.Kill)
    assert h.ask(m.Disarm).get("motor") == "tripped"      # a trip latches until clear
    assert h.ask(m.Mode, "off").get("mode") == "off"
    assert h.ask(m.Mode, "hold").code == "not_armed"


def test_trip_limit_on_a_fall():
    h = torque_host()
    h.start("open", ("loop", "tilt"), ("out", "0"), ("time_s", "5"))   # nothing holds it up
    msgs = h.run(3.0)
    trips = h.events(msgs, "trip")
    assert [t.get("cause") for t in trips] == ["tilt_limit"]
    assert abs(float(trips[0].get("value"))) > 20.0
    assert h.board.motor == "tripped"


def test_relay_bound_trips():
    h = Host(make_board("balance", seed=2))
    h.start("relay", ("loop", "tilt"), ("amp", "2"), ("hyst", "0.05"), ("bound", "0.3"))
    msgs = h.run(3.0)
    trips = h.events(msgs, "trip")
    assert [t.get("cause") for t in trips] == ["relay_bound"]
    assert float(trips[0].get("value")) > 0.3


def test_open_loop_ends_by_itself():
    h = Host(make_board("wheel"))
    h.start("open", ("loop", "speed"), ("out", "3"), ("time_s", "0.5"))
    msgs = h.run(1.0)
    done = h.events(msgs, "done")
    assert [d.get("mode") for d in done] == ["open"]
    assert done[0].time_us == pytest.approx(0.7e6, abs=2000)   # started at 0.2 s
    assert h.board.motor == "armed" and h.board.mode.name == "off"
    assert h.ask(m.Mode, "open", (("loop", "speed"), ("out", "3"), ("time_s", "11"))).code \
        == "range"                                         # PROTOCOL.md §8: at most 10 s
    assert h.ask(m.Mode, "open", (("loop", "speed"), ("out", "30"), ("time_s", "1"))).code \
        == "range"                                         # beyond cmd_limit


@pytest.mark.parametrize("args,code", [
    ((("loop", "nosuch"), ("amp", "1")), "unknown_name"),
    ((("loop", "speed"),), "bad_args"),
    ((("loop", "speed"), ("amp", "x1")), "bad_args"),
    ((("loop", "speed"), ("amp", "1"), ("colour", "red")), "bad_args"),
    ((("loop", "speed"), ("amp", "-1")), "range"),
])
def test_relay_fields_are_checked(args, code):
    h = Host(make_board("wheel"))
    h.start("hold")
    assert h.ask(m.Mode, "relay", args).code == code
    assert h.board.mode.name == "hold"                    # nothing changed


def test_inject_at_body_needs_a_rig_with_a_body():
    h = Host(make_board("plant", den=(1.0, 1.0)))
    h.start("hold")
    reply = h.ask(m.Mode, "inject", (("loop", "main"), ("at", "body"), ("amp", "1"),
                                     ("time_s", "1")))
    assert reply.code == "unknown_name"
