"""Getting back in after a lost link (rigbench.link.reopen): the same device path opened
again, the handshake done again through the boot text a resetting board prints, and what
changed told — a restart, a latched fault, gains that differ — with the motor never armed.

Expected behaviour is the protocol's: PROTOCOL.md §2 (bytes outside a frame are skipped and
counted), §5 (handshake), §6.1 (the board clock restarts at boot), §7.3 (a board boots
disarmed; a fault stays latched until cleared).
"""

import os
import time

import pytest

from rigbench.link import Link, LinkError
from rigbench.link.reopen import device_present, remember, reopen

from ptyboard import PtyBoard

pytestmark = pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs POSIX ptys")

BOOT_TEXT = b"\r\nboot v1.2 (c) board\r\nflash check ... ok\r\n\x00\xfe\xff#####\r\n"


def wait(predicate, seconds: float = 5.0) -> bool:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.01)
    return predicate()


def verbs_sent(link) -> list[str]:
    _, lines = link.raw_since(0)
    return [ln.text.split()[0].lstrip("@") for ln in lines if ln.direction == ">"
            and ln.text.startswith("@")]


def test_a_board_restarted_on_the_same_path_is_reopened_and_the_changes_named(tmp_path):
    path = tmp_path / "board"
    first = PtyBoard("sim://wheel", path, uptime_s=60.0)
    try:
        link = Link.open(str(path))
        try:
            link.stream(100)
            gain = link.loops["speed"].gains[0]
            before = link.params[gain].value
            link.set(**{gain: before * 1.5})  # not saved: a restart brings the stored value
            link.arm()
            link.mode("hold")
            assert wait(lambda: link.last_status and link.last_status.motor == "running")
            assert wait(lambda: link.last_status.board_time_s > 0.3)
            memory = remember(link)
            assert memory.motor == "running" and memory.stream_rate_hz == 100
        finally:
            first.stop()
        assert wait(lambda: link.state == "lost")
        link.close()
        assert not device_present(str(path))
        with pytest.raises(LinkError, match="not found"):
            reopen(memory)  # not back yet: the caller tries again
        second = PtyBoard("sim://wheel", path, boot_text=BOOT_TEXT)
        try:
            assert device_present(str(path))
            result = reopen(memory)
            new = result.link
            try:
                assert result.restarted is True
                assert result.gains_changed == {gain: (before * 1.5, before)}
                assert result.motor == "off" and result.fault is None
                assert result.skipped_lines >= 1  # the boot text, skipped and counted
                assert "the board restarted" in result.changes()
                assert "arm" not in verbs_sent(new)  # never re-armed
                assert wait(lambda: new.health().telemetry_per_s > 50)  # stream restored
            finally:
                new.close()
        finally:
            second.stop()
    finally:
        if os.path.lexists(path):
            os.unlink(path)


def test_the_same_board_back_after_a_cable_glitch_keeps_its_clock_and_its_fault(tmp_path):
    path = tmp_path / "board"
    first = PtyBoard("sim://wheel", path)
    sim = first.sim  # the same board, served again on a new pty: only the cable went
    link = Link.open(str(path))
    try:
        assert wait(lambda: link.last_status and link.last_status.board_time_s > 0.2)
        link.kill()
        assert wait(lambda: link.motor_state == "tripped")
        assert wait(lambda: link.last_status.fault == "kill")
        memory = remember(link)
    finally:
        first.stop()
        link.close()
    second = PtyBoard("sim://wheel", path, sim=sim)
    try:
        result = reopen(memory)
        try:
            assert result.restarted is False  # its clock went on from where it was
            assert result.fault == "kill"
            assert "fault latched: kill" in result.changes()
            assert result.gains_changed == {} and result.other_board == ""
            assert result.motor == "tripped"
        finally:
            result.link.close()
    finally:
        second.stop()
