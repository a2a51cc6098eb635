"""The simulated board's protocol engine through HostCodec <-> BoardCodec, back to back:
every command of PROTOCOL.md §4.1 gets exactly one reply, discovery, atomic set, storage,
duplicate sequence numbers, telemetry counters and clock wrap, the bounded transmit buffer.
"""

import json
import sys
from pathlib import Path

import crcmod.predefined
import pytest

from rigbench.rig.firmware.board import make_board
from rigbench.wire import messages as m
from rigbench.wire.describe import BoardInfo, LoopInfo, ParamInfo, SignalInfo

sys.path.insert(0, str(Path(__file__).parent))
from sim_host import Host  # noqa: E402

# CRC-16/IBM-3740 ("crc-ccitt-false" in crcmod): G. Cook, Catalogue of parametrised CRC
# algorithms; independent of rigbench.wire.crc.
CRC = crcmod.predefined.mkCrcFun("crc-ccitt-false")


@pytest.fixture
def host():
    return Host(make_board("balance", seed=3))


def test_every_command_gets_exactly_one_reply(host):
    """PROTOCOL.md §4.1, one row each, in a plausible session order."""
    host.run(0.2)
    info = BoardInfo.from_fields(host.ask(m.Hello).fields)
    assert (info.rig, info.rate_hz, info.watchdog_ms, info.simulated) == \
        ("balance", 500, 500, True)
    params = [ParamInfo.from_fields(host.ask(m.DescribeParam, i).fields)
              for i in range(info.params)]
    signals = [SignalInfo.from_fields(host.ask(m.DescribeSignal, i).fields)
               for i in range(info.signals)]
    loops = [LoopInfo.from_fields(host.ask(m.DescribeLoop, i).fields) for i in range(info.loops)]
    assert [s.name for s in signals] == ["tilt", "rate", "wheel", "cmd", "sp", "relay"]
    assert {lp.name: (lp.plant, lp.relay) for lp in loops} == {
        "trim": ("integrating", "output"), "tilt": ("unstable", "integral")}
    assert [p.index for p in params] == list(range(info.params))
    for cls, args, want in [
        (m.Get, (("tilt_kp", "trip_tilt"),), {"tilt_kp": "0.64", "trip_tilt": "20"}),
        (m.Set, ((("tilt_kd", 0.01),),), {"tilt_kd": "0.01"}),
        (m.Save, (), {"count": str(sum(p.writable for p in params))}),
        (m.Restore, (), {"count": str(sum(p.writable for p in params))}),
        (m.Stream, (100.0,), {"rate_hz": "100"}),
        (m.Arm, (), {"motor": "armed"}),
        (m.Mode, ("hold",), {"mode": "hold"}),
        (m.StatusRequest, (), {"mode": "hold", "motor": "running", "fault": "none"}),
        (m.Disarm, (), {"motor": "off"}),
        (m.Kill, (), {"motor": "tripped"}),
        (m.Clear, (), {"motor": "off"}),
    ]:
        reply = host.ask(cls, *args)
        assert isinstance(reply, m.Ok), (cls.VERB, reply)
        for key, value in want.items():
            assert reply.get(key) == value, (cls.VERB, key, reply)
    for index_cmd, n in ((m.DescribeParam, info.params), (m.DescribeSignal, info.signals),
                         (m.DescribeLoop, info.loops)):
        assert host.ask(index_cmd, n).code == "unknown_name"


def test_discovery_matches_each_rig():
    for rig, kw, n_loops in (("wheel", {}, 1), ("plant", {"den": (1, 3, 3, 1)}, 1),
                             ("balance", {"drive": "torque"}, 2)):
        h = Host(make_board(rig, **kw))
        info = BoardInfo.from_fields(h.ask(m.Hello).fields)
        assert info.loops == n_loops
        units = {SignalInfo.from_fields(h.ask(m.DescribeSignal, i).fields).name:
                 SignalInfo.from_fields(h.ask(m.DescribeSignal, i).fields).unit
                 for i in range(info.signals)}
        if rig == "balance":
            assert units["cmd"] == "N.m"
        if rig == "plant":
            assert list(units) == ["r", "y", "u", "relay"]


def test_hello_refuses_another_major(host):
    reply = host.ask(m.Hello, "2.0")
    assert isinstance(reply, m.Err) and reply.code == "version"
    assert isinstance(host.ask(m.Hello, "1.7"), m.Ok)   # minor differences are tolerated


def test_set_is_atomic(host):
    before = host.ask(m.Get, ("tilt_kp", "tilt_ki", "tilt_kd")).fields
    for values, code in [
        ((("tilt_kp", 1.0), ("tilt_ki", 500.0)), "range"),
        ((("tilt_kp", 1.0), ("nosuch", 1.0)), "unknown_name"),
        ((("tilt_kp", 1.0), ("torque_limit", 0.3)), "readonly"),
    ]:
        reply = host.ask(m.Set, values)
        assert isinstance(reply, m.Err) and reply.code == code
        assert host.ask(m.Get, ("tilt_kp", "tilt_ki", "tilt_kd")).fields == before
    assert host.ask(m.Set, (("tilt_ki", 500.0),)).text == "tilt_ki 0..100"
    ok = host.ask(m.Set, (("tilt_kp", 0.123456789), ("tilt_ki", 8.0)))
    assert ok.fields == (("tilt_kp", "0.1234568"), ("tilt_ki", "8"))   # as applied (7 digits)


def test_gains_of_a_loop_under_test_are_busy(host):
    host.start("relay", ("loop", "tilt"), ("amp", "0.5"), ("hyst", "0.06"))
    assert host.ask(m.Set, (("tilt_ki", 9.0),)).code == "busy"
    assert isinstance(host.ask(m.Set, (("trim_ki", 0.06),)), m.Ok)   # another loop's gain
    assert isinstance(host.ask(m.Mode, "hold"), m.Ok)
    assert isinstance(host.ask(m.Set, (("tilt_ki", 9.0),)), m.Ok)     # in hold they can


def test_duplicate_sequence_number_resends_without_acting(host):
    host.start("hold")
    msg, frame = host.codec.command(m.Mode, "relay", (("loop", "tilt"), ("amp", "0.5")))
    host.board.receive(frame)
    first = host.pump()
    host.run(0.05)
    host.board.receive(frame)                          # a resend after a lost reply (§4.2)
    again = host.pump()
    replies = [x for x in first + again if isinstance(x, (m.Ok, m.Err))]
    assert len(replies) == 2 and replies[0] == replies[1] and replies[0].seq == msg.seq
    # acted on once: one mode event, not two
    assert len(host.events(first, "mode")) == 1 and host.events(again, "mode") == []
    # a different command with the number of the last one is a new command
    host.board.receive(host.codec.encode(m.Set(msg.seq + 2, (("trim_kd", 0.01),))))
    host.board.receive(host.codec.encode(m.Set(msg.seq + 2, (("trim_kd", 0.01),))))
    host.board.receive(host.codec.encode(m.Get(msg.seq + 2, ("trim_kd",))))
    replies = [x for x in host.pump() if isinstance(x, (m.Ok, m.Err))]
    assert [x.fields for x in replies] == [(("trim_kd", "0.01"),)] * 3


def test_unreadable_commands(host):
    board = host.board
    board.receive(b"@set 9 tilt_kp=abc|" + b"%04X" % CRC(b"set 9 tilt_kp=abc") + b"\n")
    board.receive(b"@jump 10|" + b"%04X" % CRC(b"jump 10") + b"\n")
    board.receive(b"@hello 11 1.0|0000\n")               # bad CRC: never answered (§2)
    board.receive(b"AT+GCAP\r\n")                        # junk
    replies = [x for x in host.pump() if isinstance(x, m.Err)]
    assert [(r.seq, r.code) for r in replies] == [(9, "bad_args"), (10, "unknown_verb")]
    assert host.ask(m.StatusRequest).get("rx_err") == "4"


def test_save_crc_matches_values_read_back(tmp_path):
    path = tmp_path / "nv.json"
    h = Host(make_board("balance", state_path=str(path)))
    h.ask(m.Set, (("tilt_kp", 0.7), ("trim_ki", 0.04)))
    reply = h.ask(m.Save)
    n = len(h.board.rig.params)
    infos = [ParamInfo.from_fields(h.ask(m.DescribeParam, i).fields) for i in range(n)]
    image = " ".join(f"{p.name}={m.format_number(p.value, 7)}" for p in infos if p.writable)
    assert reply.get("crc") == "%04X" % CRC(image.encode())     # §5.5
    assert reply.get("count") == str(sum(p.writable for p in infos))
    stored = json.loads(path.read_text())
    assert stored["params"]["tilt_kp"] == 0.7
    # a new board on the same storage boots with the stored values
    h2 = Host(make_board("balance", state_path=str(path)))
    assert h2.ask(m.Get, ("tilt_kp", "trim_ki")).fields == \
        (("tilt_kp", "0.7"), ("trim_ki", "0.04"))
    # restore brings them back after a change, and is refused while running
    h2.ask(m.Set, (("tilt_kp", 0.9),))
    assert h2.ask(m.Restore).get("count") == reply.get("count")
    assert h2.ask(m.Get, ("tilt_kp",)).get("tilt_kp") == "0.7"
    h2.start("hold")
    assert h2.ask(m.Restore).code == "state"


def test_storage_failure_is_reported(tmp_path):
    path = tmp_path / "missing-dir" / "nv.json"
    h = Host(make_board("wheel", state_path=str(path)))
    assert h.ask(m.Save).code == "storage"


def test_stored_file_for_another_rig_is_refused(tmp_path):
    path = tmp_path / "nv.json"
    path.write_text(json.dumps({"rig": "wheel", "params": {}}))
    with pytest.raises(ValueError, match="rig 'wheel'"):
        make_board("balance", state_path=str(path))
    path.write_text(json.dumps({"rig": "balance", "params": {"tilt_kp": 99}}))
    with pytest.raises(ValueError, match="tilt_kp"):
        make_board("balance", state_path=str(path))


def test_stream_picks_the_nearest_rate(host):
    for asked, got in ((100.0, "100"), (300.0, "250"), (170.0, "166.6667"), (5000.0, "500"),
                       (0.0, "0")):
        assert host.ask(m.Stream, asked).get("rate_hz") == got
    assert host.ask(m.Stream, -1.0).code == "range"


def test_telemetry_counter_and_clock_wrap():
    start = (1 << 32) - 5000                                # 5 ms before the wrap
    h = Host(make_board("wheel", clock_start_us=start))
    h.ask(m.Stream, 500.0)
    msgs = h.run(0.02)
    tm = [x for x in msgs if isinstance(x, m.Telemetry)]
    assert [t.frame for t in tm] == list(range(10))
    times = [t.time_us for t in tm]
    assert times[0] == start + 2000
    assert times[1] == start + 4000
    assert times[2] == 1000                                # wrapped at 2**32
    unwrapped = [t if t >= times[0] else t + (1 << 32) for t in times]
    assert all(b - a == 2000 for a, b in zip(unwrapped, unwrapped[1:]))


def test_status_at_five_hz_and_boot_event(host):
    msgs = host.run(2.0)
    st = [x for x in msgs if isinstance(x, m.Status)]
    assert len(st) == 10
    assert [x.time_us for x in st] == [200000 * k for k in range(1, 11)]
    assert host.events(kind="boot")[0] == m.Event(0, "boot", (("reason", "power"),))


def test_full_transmit_buffer_drops_telemetry_not_replies():
    board = make_board("balance", tx_capacity_bytes=2048)
    h = Host(board)
    h.ask(m.Stream, 500.0)
    for _ in range(500):                                   # 1 s, nobody reads
        board.step()
    assert board.drops > 400
    msg, frame = h.codec.command(m.StatusRequest)
    board.receive(frame)
    got = h.pump()
    replies = [x for x in got if isinstance(x, m.Ok)]
    assert replies and replies[0].get("drops") == str(board.drops)
    tm = [x for x in got if isinstance(x, m.Telemetry)]
    assert [t.frame for t in tm] == list(range(len(tm)))
    board.step()                                           # room again: the next frame
    nxt = [x for x in h.pump() if isinstance(x, m.Telemetry)]
    # the frame counter counts dropped frames: the gap tells the host how many it lost
    assert nxt[0].frame - (tm[-1].frame + 1) == board.drops


def test_loop_replies_declare_the_optional_fields_and_fit_a_line():
    # PROTOCOL.md §5.4: every simulated loop declares setpoint, limit, dfilt, action (and
    # rate where a gyro exists); §2: a line holds at most 200 bytes. The longest reply (at
    # the longest sequence number) is the figure the spec quotes.
    import re

    from rigbench.rig.firmware.boards import rig_def
    from rigbench.wire import HostCodec

    longest = 0
    for rig, kw in (("balance", {}), ("balance", {"drive": "torque"}), ("wheel", {}),
                    ("plant", {})):
        board, rd = make_board(rig, **kw), rig_def(rig, **kw)
        for i, lp in enumerate(rd.loops):
            board.receive(HostCodec.encode(m.DescribeLoop(65535, i)))
            (line,) = [ln for ln in board.output().split(b"\n") if ln.startswith(b"@ok 65535 ")]
            longest = max(longest, len(line) + 1)
            (reply,) = HostCodec().receive(line + b"\n")
            got = LoopInfo.from_fields(reply.fields)
            assert got == lp.declared(i)
            assert None not in (got.setpoint, got.limit, got.dfilt, got.action), got
    spec = (Path(__file__).parents[2] / "protocol" / "PROTOCOL.md").read_text()
    quoted = int(re.search(r"longest `loop` reply of rigbench's simulated boards is (\d+) "
                           r"bytes", spec).group(1))
    assert longest == quoted <= 200


def test_declared_action_is_the_sign_the_firmware_computes():
    # PROTOCOL.md §5.4: direct: e = measure − setpoint; reverse: e = setpoint − measure.
    # Checked against the error the board's own PID forms (rigbench.rig.firmware.control).
    from rigbench.rig.firmware.control import LoopEngine

    for rig, kw in (("balance", {}), ("wheel", {}), ("plant", {})):
        board = make_board(rig, **kw)
        h = Host(board)
        engine = LoopEngine(board.rig, 0.002)
        for i, lp in enumerate(board.rig.loops):
            declared = LoopInfo.from_fields(h.ask(m.DescribeLoop, i).fields)
            e = engine.pids[lp.name].error(setpoint=1.0, measure=0.0)
            assert e == (-1.0 if declared.action == "direct" else 1.0), (rig, lp.name)
    actions = {lp.name: lp.action for lp in make_board("balance").rig.loops}
    assert actions == {"tilt": "direct", "trim": "reverse"}
