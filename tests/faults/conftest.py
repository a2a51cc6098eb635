"""Fault tests import their scenarios from this folder; no link thread may end with an
unhandled exception (a traceback a user would see)."""

import sys
import threading
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))


@pytest.fixture
def thread_errors(monkeypatch):
    seen = []
    monkeypatch.setattr(threading, "excepthook", lambda args: seen.append(args))
    yield seen
    assert not seen, [f"{a.thread.name}: {a.exc_value!r}" for a in seen]
