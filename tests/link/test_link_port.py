"""The link on real device paths: a fake board on a pseudo-terminal in real time (pyserial's
POSIX backend), unplug by closing the master, and the one-line errors for ports that are
missing, busy or not permitted (errno meanings: POSIX, common practice, no source)."""

import errno
import time

import pytest
import serial
from fake_board import PtyBoard, SocketBoard

from rigbench.link import Link, LinkError, LinkLost
from rigbench.link.errors import open_error


@pytest.fixture
def pty_board():
    pb = PtyBoard()
    yield pb
    pb.close()


def test_handshake_and_telemetry_over_a_pty_in_real_time(pty_board, thread_errors):
    with Link.open(pty_board.path) as link:
        assert not link.clock.virtual
        assert link.info.board == "fake-1" and len(link.params) == 5
        assert link.stream(100) == 100.0
        link.sleep(0.3)
        assert len(link.snapshot()) >= 10
        h = link.health()
        assert h.state == "ok" and h.reply_latency_s is not None and h.heartbeats >= 2


def test_socket_url_reads_fixed_chunks(thread_errors):
    server = SocketBoard()
    try:
        with Link.open(server.url) as link:
            assert link.channel.read_chunk == 4096  # socket:// in_waiting says only 0 or 1
            assert link.stream(100) == 100.0
            link.sleep(0.3)
            assert len(link.snapshot()) >= 10 and link.health().bad_frames == {}
    finally:
        server.close()


def test_unplug_on_a_pty_gives_link_lost_not_a_traceback(pty_board, thread_errors):
    link = Link.open(pty_board.path)
    try:
        pty_board.unplug()  # the master closes: reads on the device fail like an unplug
        for _ in range(500):  # the reader notices at its next read
            if link.state == "lost":
                break
            time.sleep(0.01)
        assert link.state == "lost"
        with pytest.raises(LinkLost) as info:
            link.get("tilt_kp")
        assert pty_board.path in str(info.value) and "\n" not in str(info.value)
    finally:
        link.close()


def test_a_second_program_on_the_same_port_is_told_it_is_busy(pty_board, thread_errors):
    with Link.open(pty_board.path):
        with pytest.raises(LinkError) as info:
            Link.open(pty_board.path)
    msg = str(info.value)
    assert "busy" in msg and pty_board.path in msg and "\n" not in msg


def test_missing_port_is_one_line_naming_the_port_and_the_fix():
    with pytest.raises(LinkError) as info:
        Link.open("/dev/ttyDOES_NOT_EXIST0")
    msg = str(info.value)
    assert "/dev/ttyDOES_NOT_EXIST0" in msg and "rigbench ports" in msg and "\n" not in msg


def test_unknown_url_scheme_is_a_link_error():
    with pytest.raises(LinkError, match="nosuch://x"):
        Link.open("nosuch://x")


@pytest.mark.parametrize("code, words", [
    (errno.EACCES, "dialout"), (errno.EPERM, "dialout"), (errno.EBUSY, "busy"),
    (errno.ENOENT, "rigbench ports"),
])
def test_open_errors_name_the_likely_fix(code, words):
    exc = serial.SerialException(code, f"could not open port /dev/ttyX: [Errno {code}] ...")
    err = open_error("/dev/ttyX", exc)
    assert words in str(err) and "/dev/ttyX" in str(err)
