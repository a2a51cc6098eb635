"""The command line asks before it moves the motor of a real board (tune, sweep), and a
script says --yes. A simulated board is not asked about (it moves no motor)."""

import io

import pytest

from rigbench.cli import main
from rigbench.commands._common import CommandError
from rigbench.commands._confirm import confirm_motion
from rigbench.link import Link

URL = "sim://wheel?clock=virtual"


class _Tty(io.StringIO):
    def isatty(self):
        return True


class _Link:
    simulated, url, last_status = False, "/dev/ttyACM0", None
    info = type("Info", (), {"board": "bench-7"})()


class _Args:
    yes = False


@pytest.mark.parametrize("answer,agreed", [("yes\n", True), ("YES\n", True), ("\n", False),
                                           ("y\n", False), ("no\n", False)])
def test_only_a_typed_yes_starts_the_motor(answer, agreed):
    err = io.StringIO()
    if agreed:
        confirm_motion(_Link(), _Args(), "a relay test", stdin=_Tty(answer), stderr=err)
    else:
        with pytest.raises(CommandError, match="not confirmed"):
            confirm_motion(_Link(), _Args(), "a relay test", stdin=_Tty(answer), stderr=err)
    text = err.getvalue()
    assert "moves the motor" in text and "not an emergency stop" in text


def test_without_a_terminal_it_refuses_unless_told_yes():
    with pytest.raises(CommandError, match="--yes") as e:
        confirm_motion(_Link(), _Args(), "a sweep", stdin=io.StringIO("yes\n"),
                       stderr=io.StringIO())
    assert e.value.code == 2
    args = _Args()
    args.yes = True
    confirm_motion(_Link(), args, "a sweep", stdin=io.StringIO(""), stderr=io.StringIO())


@pytest.mark.parametrize("argv", [["tune", "--loop", "speed"],
                                  ["sweep", "--amplitudes", "0.5", "--repeats", "1"]])
def test_tune_and_sweep_on_a_real_board_send_nothing_unconfirmed(argv, monkeypatch, capsys):
    # the simulated wheel board, declared as a real one: no terminal, no --yes -> exit 2,
    # and the board was never armed
    monkeypatch.setattr(Link, "simulated", property(lambda self: False))
    sent = []
    real_arm = Link.arm
    monkeypatch.setattr(Link, "arm", lambda self, *a, **k: sent.append(1) or real_arm(self))
    monkeypatch.setattr("sys.stdin", io.StringIO(""))
    assert main(argv + ["--port", URL]) == 2
    err = capsys.readouterr().err
    assert "moves the motor" in err and "--yes" in err and not sent
