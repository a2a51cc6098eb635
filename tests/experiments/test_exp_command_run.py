"""``experiment_run``, the block ``rigbench tune`` and ``rigbench sweep`` run their
experiment in: which exit code the board's refusal and a rejected option get, and that the
progress line is ended however the block ends."""

import io
import sys

import pytest

from rigbench.commands._common import CommandError
from rigbench.commands._progress import experiment_run
from rigbench.experiments.guards import CLEAR_HINT
from rigbench.experiments.runner import ArmRefused, Progress


def _terminal(monkeypatch):
    """A terminal as stderr. Set inside the test: output capture replaces sys.stderr
    between a fixture's set-up and the test's call."""
    tty = io.StringIO()
    tty.isatty = lambda: True
    monkeypatch.setattr(sys, "stderr", tty)
    return tty


def _progress():
    return Progress("relay tilt", "relay", 1.0, 60.0, 0.25)


def test_a_refusal_to_arm_is_exit_4_with_the_boards_reasons(monkeypatch):
    terminal = _terminal(monkeypatch)
    with pytest.raises(CommandError) as caught:
        with experiment_run() as bar:
            bar(_progress())
            raise ArmRefused(("tilt", "fault"))
    # exit codes as the tune and sweep help text lists them (common practice, no source)
    assert caught.value.code == 4
    assert str(caught.value) == "the board refused to arm: tilt, fault; " + CLEAR_HINT
    assert "rigbench clear" in CLEAR_HINT
    assert terminal.getvalue().startswith("\r") and terminal.getvalue().endswith("\n")


def test_an_option_the_experiment_rejects_is_exit_2(monkeypatch):
    terminal = _terminal(monkeypatch)
    with pytest.raises(CommandError) as caught:
        with experiment_run():
            raise ValueError("amplitude must be > 0")
    assert caught.value.code == 2 and str(caught.value) == "amplitude must be > 0"
    assert terminal.getvalue() == ""  # nothing drawn, nothing to end


def test_other_errors_pass_through_and_the_line_is_ended(monkeypatch):
    terminal = _terminal(monkeypatch)
    with pytest.raises(KeyboardInterrupt):
        with experiment_run() as bar:
            bar(_progress())
            raise KeyboardInterrupt
    assert terminal.getvalue().endswith("\n")
    with experiment_run() as bar:
        bar(_progress())
    assert terminal.getvalue().count("\n") == 2
