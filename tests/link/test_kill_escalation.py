"""A kill the board does not confirm escalates (rigbench.link.killing, PROTOCOL.md §7):
the framed kill and disarm, then the heartbeat stops so the board's watchdog trips the
motor. The line loses the kill bytes (sim:// ``dropkill=1``); virtual clock."""

from __future__ import annotations

import pytest

from rigbench.cli import main
from rigbench.link import Link
from rigbench.link.killing import CUT_POWER

URL = "sim://balance?clock=virtual&dropkill=1"


def _running(link):
    link.arm()
    link.mode("hold")
    link.sleep(0.3)
    assert link.status().motor == "running"


def test_kill_bytes_lost_on_the_line_escalate_to_the_framed_kill():
    with Link.open(URL) as link:
        _running(link)
        out = link.kill_confirmed()
        board = link.port.board
        assert out.escalated and out.confirmed and out.steps[:2] == ("framed kill", "disarm")
        assert board.motor == "tripped" and board.fault == "kill"
        # confirmed within the confirmation wait and two requests (each answered in 50 ms)
        assert out.confirmed_s - out.sent_s < 0.25 + 2 * 0.2
        assert [e.kind for e in link.events_since(0)[1] if e.source == "link"].count(
            "kill_unconfirmed") == 1


def test_with_every_stop_command_lost_the_watchdog_trips_the_motor():
    with Link.open(URL) as link:
        _running(link)
        real_write = link.port.write

        def lossy(data):   # the line loses the kill bytes, the framed kill and disarm
            data = bytes(data)
            if data.startswith((b"@kill ", b"@disarm ")):
                return len(data)
            return real_write(data)

        link.port.write = lossy
        out = link.kill_confirmed()
        board = link.port.board
        assert out.escalated and out.confirmed and out.steps[-1] == "heartbeat stopped"
        assert board.motor == "tripped" and board.fault == "watchdog"
        # the trip came within the watchdog time (500 ms) of the heartbeat stopping, plus
        # the escalation requests before it (PROTOCOL.md §7.2: within one loop period)
        assert out.confirmed_s - out.sent_s < 0.25 + 4 * 0.2 + 0.5 + 0.1
        assert not link.channel.heartbeat_stopped   # tripped: the heartbeat flows again


def test_a_guard_kill_lost_on_the_line_still_ends_a_run_with_the_motor_off(tmp_path, capsys):
    # the run's own guard kills (|tilt| over 1.5°); the line loses the kill bytes: the run
    # must end with the motor tripped and say the kill was escalated, never 'running'
    seq = tmp_path / "seq.yaml"
    seq.write_text(
        "sequence: 1\nname: lost kill\nport: " + URL + "\nguards: {tilt_deg: 15}\n"
        "on_abort: kill\nsteps:\n  - arm\n  - hold\n  - wait: 1\n"
        "  - sweep: {loop: tilt, shape: pulse, at: body, amplitudes: [0.1, -0.1], "
        "repeats: 2, spacing_s: 2, time_s: 0.05, guards: {tilt_deg: 1.5}}\n  - disarm\n")
    code = main(["run", str(seq), "--out", str(tmp_path / "res"), "--no-plots", "--json"])
    import json
    s = json.loads(capsys.readouterr().out)
    assert code == 5 and s["stopped_by"] == "guard"
    assert s["motor_after"] == "tripped"
    assert CUT_POWER in s["detail"]


@pytest.mark.parametrize("url", ["sim://balance?clock=virtual"])
def test_a_kill_that_gets_through_is_confirmed_without_escalation(url):
    with Link.open(url) as link:
        _running(link)
        out = link.kill_confirmed()
        assert out.confirmed and not out.escalated and out.steps == ()
        assert out.confirmed_s - out.sent_s < 0.05
