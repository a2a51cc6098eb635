"""The link against a fake board (tests/link/fake_board.py) on a virtual clock.

Behaviour checked against PROTOCOL.md (§4.2 resend rules, §5 discovery, §6.1 counters,
§7.1 kill, §7.2 watchdog): the spec is the outside reference here.
"""

import threading

import pytest
from fake_board import LOOPS, PARAMS, SIGNALS, FakeBoard, FakePort

from rigbench.link import (
    BoardRefused, IncompatibleBoard, Link, LinkLost, LinkTimeout,
)
from rigbench.wire import KILL
from rigbench.wire.messages import Arm, Err, Get, Set


def frames_of(port, verb):
    return [data for _, data in port.write_log if data.startswith(b"@" + verb.encode() + b" ")]


def test_handshake_discovers_the_board(link):
    assert link.info.board == "fake-1" and link.info.simulated and link.simulated
    assert list(link.params) == [p.name for p in PARAMS]  # declaration order kept
    assert link.params["tilt_kp"].value == 20.0 and not link.params["loop_hz"].writable
    assert [(s.name, s.unit) for s in link.signals] == [(s.name, s.unit) for s in SIGNALS]
    assert link.loops["tilt"] == LOOPS[0]
    assert link.state == "ok"
    assert any(e.kind == "handshake" for e in link.events_since(0)[1])


def test_incompatible_major_version_is_refused(thread_errors):
    port = FakePort(FakeBoard(version="2.0"))
    with pytest.raises(IncompatibleBoard, match="another major version"):
        Link.attach(port, url="fake://v2")


def test_replies_are_matched_by_sequence_number_across_threads(link):
    names = list(link.params)
    results, errors = {}, []

    def worker(name):
        try:
            for _ in range(20):
                results.setdefault(name, set()).update(link.get(name))
        except Exception as exc:  # pragma: no cover - shows in the assert below
            errors.append(exc)

    threads = [threading.Thread(target=worker, args=(n,)) for n in names]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    assert not errors
    assert results == {n: {n} for n in names}


def test_idempotent_command_is_resent_with_the_same_seq(link, port, board):
    board.mute["set"] = 1  # the board acts but its first reply is lost
    applied = link.set(tilt_kp=12.5, tilt_kd=0.25)
    assert applied == {"tilt_kp": 12.5, "tilt_kd": 0.25}
    sent = frames_of(port, "set")
    assert len(sent) == 2 and sent[0] == sent[1]  # same bytes: same seq
    assert board.applied_sets == 1  # §4.2: the repeat is answered, not acted on again
    assert link.params["tilt_kp"].value == 12.5
    h = link.health()
    assert (h.resends, h.timeouts) == (1, 1)


def test_non_idempotent_command_is_not_resent_and_status_settles_a_lost_reply(link, port,
                                                                            board):
    link.sleep(0.3)  # heartbeats: the interlock allows arming
    board.mute["arm"] = 1  # the board arms, its reply is lost
    assert link.arm() == "armed"
    assert len(frames_of(port, "arm")) == 1 and frames_of(port, "status")
    assert board.motor == "armed" and link.health().confirmed_by_status == 1
    assert not Arm.IDEMPOTENT and Get.IDEMPOTENT and Set.IDEMPOTENT


def test_a_mode_lost_on_the_way_is_sent_again_as_a_new_command(link, port, board):
    link.sleep(0.3)
    link.arm()
    write = port.write
    lost = []

    def lose_first_mode(data):
        if data.startswith(b"@mode ") and not lost:
            lost.append(data)
            return len(data)  # never reaches the board
        return write(data)
    port.write = lose_first_mode
    assert link.mode("hold")["mode"] == "hold"
    sent = frames_of(port, "mode")
    assert len(lost) == 1 and len(sent) == 1  # the lost one never reached the board
    assert lost[0].split(b" ")[1] != sent[0].split(b" ")[1]  # sent again: a new number
    assert board.mode == "hold" and board.motor == "running"


def test_a_mode_that_never_gets_through_ends_in_one_timeout(link, port, board):
    link.sleep(0.3)
    link.arm()
    board.mute["mode"] = 100
    board.mode = "off"
    real_act = board._act

    def refuse_silently(msg, t):  # the board never changes mode and the reply is lost
        if type(msg).VERB == "mode":
            return real_act(type(msg)(msg.seq, "off", ()), t)
        return real_act(msg, t)
    board._act = refuse_silently
    with pytest.raises(LinkTimeout, match="did not show it done"):
        link.mode("hold")


def test_idempotent_command_gives_up_after_its_retries(link, port, board):
    board.mute["get"] = 100
    with pytest.raises(LinkTimeout, match="11 tries"):
        link.get("tilt_kp")
    assert len(frames_of(port, "get")) == 11


def test_board_refusal_raises_with_code_and_keeps_the_value(link, board):
    with pytest.raises(BoardRefused) as info:
        link.set(tilt_kp=1000.0, tilt_kd=0.1)
    assert info.value.code == "range" and "tilt_kp" in info.value.text
    assert board.values["tilt_kp"] == 20.0 and board.values["tilt_kd"] == 0.5
    with pytest.raises(BoardRefused) as info:
        link.set(loop_hz=500)
    assert info.value.code == "readonly"
    with pytest.raises(BoardRefused) as info:
        link.mode("hold")  # §7.3: a mode other than off needs the motor armed
    assert info.value.code == "not_armed" and info.value.verb == "mode"


def test_kill_goes_ahead_of_frames_queued_behind_a_write(link, port, board):
    lock = link.channel._wlock
    lock.acquire()  # another writer is mid-write
    queued = threading.Thread(target=lambda: link.request(Get, ("tilt_kp",)))
    queued.start()
    killer = threading.Thread(target=link.kill)
    killer.start()
    lock.release()
    killer.join(5)
    queued.join(5)
    log = [data for _, data in port.write_log if not data.startswith(b"@hb")]
    first_get = next(i for i, d in enumerate(log) if d.startswith(b"@get"))
    first_kill = next(i for i, d in enumerate(log) if d == KILL * 3)
    assert first_kill < first_get
    assert board.motor == "tripped" and board.fault == "kill"


def test_kill_bytes_then_framed_kill_and_motor_reported_tripped(link, port, board):
    t = link.kill(framed=True)
    writes = [d for _, d in port.write_log if not d.startswith(b"@hb")]
    assert writes[-2] == KILL * 3 and writes[-1].startswith(b"@kill ")
    assert t == pytest.approx(link.now(), abs=0.05)
    assert link.motor_state == "tripped"
    link.sleep(0.3)
    trips = [e for e in link.events_since(0)[1] if e.kind == "trip"]
    assert trips and trips[0].get("cause") == "kill" and trips[0].source == "board"
    assert link.last_status.motor == "tripped" and link.last_status.fault == "kill"
    assert link.clear() == "off"


def test_heartbeat_keeps_the_watchdog_happy_in_virtual_time(link, board):
    assert link.arm() == "armed"
    link.sleep(30.0)  # 30 s of board time; 120 watchdog periods of 250 ms
    assert board.motor == "armed" and link.motor_state == "armed"
    assert link.last_status.heartbeat_age_s <= 0.11
    assert link.health().heartbeats >= 300


def test_without_heartbeat_the_watchdog_trips(thread_errors):
    board = FakeBoard()
    link = Link.attach(FakePort(board), url="fake://", heartbeat_s=0.5)  # slower than 250 ms
    try:
        link.arm()
        link.sleep(2.0)
        assert board.motor == "tripped" and board.fault == "watchdog"
        assert link.motor_state == "tripped"
    finally:
        link.close()


def test_counter_gaps_count_lost_and_dropped_frames(thread_errors):
    board = FakeBoard(lose_every=10, drop_every=25)
    link = Link.attach(FakePort(board), url="fake://")
    try:
        assert link.stream(100) == 100.0
        link.sleep(10.0)
        produced = board.frame  # frames numbered 0 .. produced-1
        h = link.health()
        rows = len(link.snapshot())
        lost_in_transit = len([f for f in range(produced) if f % 10 == 9 and f % 25 != 24])
        dropped = len([f for f in range(produced) if f % 25 == 24])
        assert board.drops == dropped and h.board_drops <= dropped
        # the last frames may be gone after the last received one: no gap seen yet
        assert h.lost_frames == produced - rows - (produced - 1 - link.snapshot(rows=1).frame[0])
        assert lost_in_transit + dropped - 2 <= h.lost_frames <= lost_in_transit + dropped
    finally:
        link.close()


def test_board_time_and_frames_unwrap_across_the_32_bit_wrap(thread_errors):
    board = FakeBoard(start_time_us=(1 << 32) - 300_000, start_frame=(1 << 32) - 20)
    link = Link.attach(FakePort(board), url="fake://")
    try:
        link.stream(100)
        link.sleep(1.0)
        block = link.snapshot()
        assert len(block) >= 95
        assert block.frame[0] < (1 << 32) < block.frame[-1]
        assert (block.frame[1:] - block.frame[:-1] == 1).all()
        steps = block.board_time_s[1:] - block.board_time_s[:-1]
        assert steps == pytest.approx(0.01, abs=1e-6)  # 100 Hz, no jump at the wrap
        assert link.health().resets == 0
    finally:
        link.close()


def test_board_restart_is_detected_and_the_link_handshakes_again(link, board):
    link.stream(50)
    board.schedule.append((link.now() + 0.5, lambda b, t: b.reboot(t)))
    link.sleep(1.0)
    assert link.wait_until(lambda: link.health().resyncs == 1, 5.0)
    h = link.health()
    assert h.resets == 1 and link.state == "ok"
    assert board.div == 10  # stream rate re-applied after the restart
    kinds = [e.kind for e in link.events_since(0)[1]]
    assert kinds.index("boot") < kinds.index("resync")
    before = link.telemetry_cursor()
    link.sleep(0.5)
    assert len(link.read_since(before)[1]) >= 20


def test_unplug_makes_requests_raise_link_lost(link, port):
    port.unplugged = True
    with pytest.raises(LinkLost, match="lost"):
        link.get("tilt_kp")
    assert link.state == "lost" and "lost" in link.health().lost_reason
    with pytest.raises(LinkLost):
        link.sleep(1.0)
    link.close()  # no traceback from any thread (thread_errors fixture)


def test_save_is_verified_and_restore_reloads(link, board):
    link.set(tilt_kp=33.0)
    result = link.save()
    assert result.verified and result.count == 4
    link.set(tilt_kp=5.0)
    assert link.restore() == 4
    assert link.params["tilt_kp"].value == 33.0 and board.values["tilt_kp"] == 33.0


def test_junk_before_the_handshake_is_counted_not_fatal(thread_errors):
    board = FakeBoard()
    board.out += b"AT+GCAP\r\nATE0\r\n"  # a desktop's modem probe
    link = Link.attach(FakePort(board), url="fake://")
    try:
        assert link.info is not None
        assert link.health().bad_frames.get("junk", 0) == 2
    finally:
        link.close()


def test_status_request_and_status_frames(link):
    st = link.status()
    assert st.motor == "off" and st.mode == "off" and "heartbeat" not in st.why
    link.sleep(0.5)
    cur, sts = link.statuses_since(0)
    assert len(sts) >= 2 and all(s.board_time_s is not None for s in sts)
    assert sts[-1].host_time_s == pytest.approx(sts[-1].board_time_s, abs=0.05)


def test_raw_tap_shows_both_directions_and_the_kill_byte(link):
    cur = link.raw_cursor()
    link.get("tilt_kp")
    link.kill()
    cur, lines = link.raw_since(cur)
    texts = [(ln.direction, ln.text) for ln in lines]
    assert any(d == ">" and t.startswith("@get ") for d, t in texts)
    assert any(d == "<" and t.startswith("@ok ") and "tilt_kp=20" in t for d, t in texts)
    assert (">", "\\x18\\x18\\x18") in texts
    assert str(lines[0]).split()[1] in "<>"


def test_a_silent_port_gives_a_hello_timeout_with_a_hint(thread_errors):
    board = FakeBoard()
    board.mute["hello"] = 100  # nothing answers
    with pytest.raises(LinkTimeout, match="no answer from fake://quiet to hello") as info:
        Link.attach(FakePort(board), url="fake://quiet", handshake_timeout_s=1.0)
    assert "\n" not in str(info.value)
    hellos = [m for _, m in board.received if type(m).__name__ == "Hello"]
    # resent with the same seq until the handshake time is spent (1 s of 0.25 s waits)
    assert len(hellos) == 4 and len({m.seq for m in hellos}) == 1


def test_a_hello_refused_with_state_is_sent_again_under_a_new_number(thread_errors):
    # a board following the older PROTOCOL.md §4.2 takes a restarted host's `hello 1` for a
    # resend of the previous host's and answers `err 1 state` after a trip: the host asks
    # again with the next number, a new command
    board = FakeBoard()
    board.last_seq, board.last_reply = 1, Err(1, "state", "tripped since this command")
    with Link.attach(FakePort(board), url="fake://board") as link:
        assert link.info is not None and link.info.params == len(board.params)
