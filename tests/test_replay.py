"""``replay://``: a recording played back as a read-only board. The link handshakes with it,
its telemetry is the CSV's rows (frame numbers, board times and values), every change is
refused, looping runs on without a restart, and the URL options are parsed strictly."""

import numpy as np
import pytest

from rigbench.cli import main
from rigbench.handlers.protocol_replay import ReplayOptions, parse_replay_url
from rigbench.rig.replay import ReplayBoard
from rigbench.link import BoardRefused, Link, LinkError
from rigbench.recordings.recording import Recorder, load_recording
from rigbench.wire import HostCodec
from rigbench.wire import messages as m


@pytest.fixture(scope="module")
def recording(tmp_path_factory):
    """A 1.5 s recording of the simulated balance rig in hold, with a mode change in it."""
    path = tmp_path_factory.mktemp("rec") / "hold.csv"
    with Link.open("sim://balance?clock=virtual&seed=2") as link:
        link.arm()
        link.stream(250)
        with Recorder(path, link, background=False, notes=["replay test"]) as rec:
            link.mode("hold")
            for _ in range(15):
                link.sleep(0.1)
                rec.poll()
        link.disarm()
    return load_recording(path)


def _url(rec, options="clock=virtual"):
    return f"replay://{rec.path}?{options}"


def _collect(link, seconds, rate_hz):
    link.stream(rate_hz)
    cursor = link.telemetry_cursor()
    link.sleep(seconds)
    return link.read_since(cursor)[1]


def test_link_handshakes_with_the_recorded_board(recording):
    side = recording.sidecar
    with Link.open(_url(recording)) as link:
        info = link.info
        assert (info.board, info.firmware, info.rig) == ("sim-balance-1", "0.1.0", "balance")
        assert info.simulated and info.rate_hz == 500.0
        assert list(link.params) == list(side["params_at_start"])
        assert {n: p.value for n, p in link.params.items()} == \
            {n: p["value"] for n, p in side["params_at_start"].items()}
        assert [(s.name, s.unit) for s in link.signals] == \
            list(zip(recording.signals, recording.units))
        assert link.get("tilt_kp", "trip_tilt") == {
            "tilt_kp": side["params_at_start"]["tilt_kp"]["value"],
            "trip_tilt": side["params_at_start"]["trip_tilt"]["value"]}
        # the recording started with the motor armed, then ran in hold
        assert link.status().motor in ("armed", "running")


def test_the_replay_declares_the_recorded_loops(recording):
    # the sidecar keeps the loops as the board declared them; the replay declares them again
    with Link.open("sim://balance?clock=virtual&seed=2") as live:
        declared = dict(live.loops)
    with Link.open(_url(recording)) as link:
        assert list(link.loops) == list(declared) == ["trim", "tilt"]
        for name, loop in link.loops.items():
            assert loop.to_fields()[1:] == declared[name].to_fields()[1:]


def test_telemetry_is_the_recordings_rows(recording):
    with Link.open(_url(recording)) as link:
        block = _collect(link, 1.0, 250)
        health = link.health()
    assert len(block) > 150 and health.lost_frames == 0 and health.resets == 0
    k = np.searchsorted(recording.frame, block.frame)
    np.testing.assert_array_equal(recording.frame[k], block.frame)
    assert np.all(np.diff(k) == 1)                      # every row in order, none skipped
    np.testing.assert_array_equal(block.values, recording.values[k])
    np.testing.assert_allclose(block.board_time_s, recording.board_time_s[k], atol=1e-6)


def test_stream_rate_divides_the_recorded_rate(recording):
    with Link.open(_url(recording)) as link:
        # recorded at 250 Hz: the nearest of 250/n, as a board picks its loop rate / n
        assert link.stream(100) == pytest.approx(250 / 3)
        assert link.stream(120) == pytest.approx(250 / 2)
        block = _collect(link, 0.5, 120)
        assert link.stream(0) == 0
    assert len(block) > 50 and np.all(np.diff(block.frame) == 2)


def test_every_change_is_refused_as_read_only(recording):
    with Link.open(_url(recording)) as link:
        for call, code in ((lambda: link.set(tilt_kp=1.0), "busy"), (link.arm, "state"),
                           (lambda: link.mode("hold"), "state"), (link.disarm, "state"),
                           (link.clear, "state"), (link.save, "state")):
            with pytest.raises(BoardRefused) as e:
                call()
            assert e.value.code == code and "read-only" in e.value.text
        link.kill()  # the kill byte changes nothing on a replay; the link stays up
        assert link.get("tilt_kp")["tilt_kp"] == link.params["tilt_kp"].value


def test_loop_runs_on_past_the_end_without_a_restart(recording):
    span = recording.board_time_s[-1] - recording.board_time_s[0]
    with Link.open(_url(recording, "clock=virtual&loop=1")) as link:
        block = _collect(link, span * 1.6, 250)
        health = link.health()
    assert health.resets == 0 and health.lost_frames == 0
    assert np.all(np.diff(block.frame) == 1) and np.all(np.diff(block.board_time_s) > 0)
    n = len(recording)
    # after the end the same rows come again, in the same order
    first = int(np.searchsorted(recording.frame, block.frame[0]))
    again = recording.values[(first + np.arange(len(block))) % n]
    np.testing.assert_array_equal(block.values, again)


def test_speed_runs_the_recording_faster_on_the_ports_clock(recording):
    with Link.open(_url(recording, "clock=virtual&speed=4")) as link:
        t0 = link.now()
        block = _collect(link, 0.25, 250)
        elapsed = link.now() - t0
    recorded = block.board_time_s[-1] - block.board_time_s[0]
    assert recorded == pytest.approx(4 * elapsed, abs=0.05)


def test_info_and_watch_run_on_a_replay(recording, capsys):
    assert main(["info", "--port", _url(recording)]) == 0
    out = capsys.readouterr().out
    assert "sim-balance-1" in out and "tilt_kp" in out
    assert main(["watch", "--port", _url(recording), "--seconds", "0.5", "--every", "0.1"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].split()[:3] == ["time", "[s]", "tilt"] and len(lines) >= 5


@pytest.mark.parametrize("url,expected", [
    ("replay://rec.csv", ReplayOptions("rec.csv")),
    ("replay://results/a%20b/rec.csv?loop=1", ReplayOptions("results/a b/rec.csv", loop=True)),
    ("replay:///abs/rec.CSV?clock=virtual&speed=2.5",
     ReplayOptions("/abs/rec.CSV", clock="virtual", speed=2.5)),
])
def test_url_options(url, expected):
    assert parse_replay_url(url) == expected


@pytest.mark.parametrize("url,words", [
    ("replay://", "needs the path"),
    ("replay://rec.yaml", ".csv"),
    ("replay://rec.csv?speed=0", "speed=0"),
    ("replay://rec.csv?speed=fast", "not a number"),
    ("replay://rec.csv?clock=wall", "real or virtual"),
    ("replay://rec.csv?loop=yes", "0 or 1"),
    ("replay://rec.csv?rate=5", "unknown"),
    ("replay://rec.csv?loop=1&loop=0", "twice"),
    ("sim://rec.csv", "not a replay"),
])
def test_bad_urls_say_what_is_wrong(url, words):
    with pytest.raises(ValueError, match=words):
        parse_replay_url(url)


def test_a_missing_or_bad_recording_fails_to_open(tmp_path):
    with pytest.raises(LinkError, match="no-such.csv"):
        Link.open(f"replay://{tmp_path}/no-such.csv")
    bad = tmp_path / "bad.csv"
    bad.write_text("host_time [s],board_time [s],frame [1],x [1]\n0,0,0,1\n")
    with pytest.raises(LinkError, match="at least two rows"):
        Link.open(f"replay://{bad}")


def test_real_clock_replay_serves_recorded_rows(recording):
    # paced by the wall clock: whatever arrives in the wait is the recording's rows
    with Link.open(_url(recording, "speed=2")) as link:
        assert not link.port.clock.virtual
        block = _collect(link, 0.3, 250)
    k = np.searchsorted(recording.frame, block.frame)
    assert len(block) >= 1
    np.testing.assert_array_equal(block.values, recording.values[k])


def test_a_vanishing_rate_and_a_repeated_name_are_answered_as_a_board_does(recording):
    board = ReplayBoard(recording)
    board.receive(HostCodec.encode(m.Stream(1, 1e-310)) +
                  HostCodec.encode(m.Get(2, ("tilt_kp", "tilt_kp"))))
    replies = [x for x in HostCodec().receive(board.drain()) if isinstance(x, (m.Ok, m.Err))]
    # PROTOCOL.md §6.1: the slowest rate (recorded rate / (2**32 - 1)); §5.5: bad_args
    assert [r.seq for r in replies] == [1, 2]
    assert m.parse_number(replies[0].get("rate_hz")) == pytest.approx(250 / (2**32 - 1),
                                                                      rel=1e-6)
    assert isinstance(replies[1], m.Err) and replies[1].code == "bad_args"
