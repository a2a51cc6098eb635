"""Fixtures for every test folder: ``thread_errors``, a guard that no thread (the link's
reader, writer, heartbeat) ends with an unhandled exception, a traceback a user would see."""

import threading

import pytest

from rigbench.link.urls import register_url_handlers

# Tests open sim:// and replay:// ports with serial.serial_for_url directly too.
register_url_handlers()


@pytest.fixture
def thread_errors(monkeypatch):
    seen = []
    monkeypatch.setattr(threading, "excepthook", lambda args: seen.append(args))
    yield seen
    assert not seen, [f"{a.thread.name}: {a.exc_value!r}" for a in seen]


# RIGBENCH_TEST_BOARD=c: every sim:// board of the run is the C board library (protocol/
# board-c) on the same Python plants, so host-level tests prove the host cannot tell the
# two apart (tests/board_c/test_same_host_tests.py runs a set of modules this way).
if __import__("os").environ.get("RIGBENCH_TEST_BOARD") == "c":
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).parent / "board_c"))

    @pytest.fixture(autouse=True)
    def _c_board_engine(monkeypatch):
        from cboard import make_c_board

        monkeypatch.setattr("rigbench.rig.simlink.make_board", make_c_board)
