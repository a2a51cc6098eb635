"""The link against the built-in simulated board (``sim://...?clock=virtual``): the board
side is the project's own firmware code, so these check the two halves agree on
PROTOCOL.md (§5 discovery, §6 telemetry and status, §7 kill and watchdog)."""

import pytest

from rigbench.link import Link, LinkLost

SIM = "sim://balance?clock=virtual"


@pytest.fixture
def sim_link(thread_errors):
    link = Link.open(SIM)
    yield link
    link.close()


def test_discovery_matches_what_the_board_declares(sim_link):
    board = sim_link.port.board
    assert sim_link.info.simulated and sim_link.info.params == len(sim_link.params)
    assert [s.name for s in sim_link.signals][:1] == ["tilt"]
    assert set(sim_link.loops) >= {"tilt"}
    for name, p in sim_link.params.items():
        assert p.minimum <= p.value <= p.maximum, name
    assert board is not None


def test_heartbeat_keeps_an_armed_board_armed_for_a_minute_of_board_time(sim_link):
    assert sim_link.arm() == "armed"
    sim_link.sleep(60.0)
    st = sim_link.status()
    assert st.motor == "armed" and st.fault is None
    assert not [e for e in sim_link.events_since(0)[1] if e.kind == "trip"]
    assert sim_link.last_status.heartbeat_age_s <= 0.15


def test_kill_trips_the_board_and_status_says_so(sim_link):
    sim_link.arm()
    sim_link.kill(framed=True)
    assert sim_link.status().motor == "tripped" and sim_link.motor_state == "tripped"
    sim_link.sleep(0.5)
    causes = [e.get("cause") for e in sim_link.events_since(0)[1] if e.kind == "trip"]
    assert causes[:1] == ["kill"]


def test_telemetry_rate_and_time_axis(sim_link):
    rate = sim_link.stream(100)
    sim_link.sleep(2.0)
    block = sim_link.snapshot(seconds=1.0)
    steps = block.board_time_s[1:] - block.board_time_s[:-1]
    assert steps == pytest.approx(1.0 / rate, rel=1e-3)
    assert sim_link.health().lost_frames == 0


def test_board_reset_is_followed_by_a_new_handshake(thread_errors):
    with Link.open(SIM + "&reset=1.0") as link:
        link.stream(50)
        link.sleep(2.0)
        assert link.wait_until(lambda: link.channel.ingest.c["resyncs"] >= 1, 5.0)
        h = link.health()
        assert h.resets == 1 and h.state == "ok"
        cur = link.telemetry_cursor()
        link.sleep(0.5)
        assert len(link.read_since(cur)[1]) >= 20  # the stream rate was set again


def test_unplug_fault_gives_link_lost(thread_errors):
    with Link.open(SIM + "&unplug=1.0") as link:
        with pytest.raises(LinkLost):
            link.sleep(3.0)
        assert link.state == "lost"


def test_a_noisy_line_costs_frames_not_commands(thread_errors):
    with Link.open(SIM + "&corrupt=0.0005&seed=3") as link:
        link.stream(200)
        for _ in range(40):
            assert link.get("tilt_kp")["tilt_kp"] == pytest.approx(link.params["tilt_kp"].value)
            link.sleep(0.1)
        h = link.health()
        assert sum(h.bad_frames.values()) > 0 and h.lost_frames > 0


def test_sleeping_on_the_simulated_clock_moves_time_too(sim_link):
    # a paced virtual clock runs while anyone waits: on the link, or on the port's clock
    sim_link.stream(100)
    t0, cur = sim_link.now(), sim_link.telemetry_cursor()
    sim_link.clock.sleep(2.0)
    assert sim_link.now() - t0 == pytest.approx(2.0, abs=0.05)
    assert 190 <= len(sim_link.read_since(cur)[1]) <= 205


def test_get_asks_for_a_repeated_name_once(sim_link):
    # PROTOCOL.md §5.5: a board refuses a `get` naming a parameter twice, so the host
    # sends each name once and still answers for every name it was given
    cursor = sim_link.raw_cursor()
    got = sim_link.get("tilt_kp", "tilt_ki", "tilt_kp")
    assert got == {"tilt_kp": sim_link.port.board.params.values["tilt_kp"],
                   "tilt_ki": sim_link.port.board.params.values["tilt_ki"]}
    sent = [r.text for r in sim_link.raw_since(cursor)[1] if r.direction == ">"
            and r.text.startswith("@get ")]
    assert len(sent) == 1 and sent[0].split("|")[0].split(" ")[2:] == ["tilt_kp", "tilt_ki"]
