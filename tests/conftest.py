"""Fixtures for every test folder: ``thread_errors``, a guard that no thread (the link's
reader, writer, heartbeat) ends with an unhandled exception, a traceback a user would see."""

import threading

import pytest


@pytest.fixture
def thread_errors(monkeypatch):
    seen = []
    monkeypatch.setattr(threading, "excepthook", lambda args: seen.append(args))
    yield seen
    assert not seen, [f"{a.thread.name}: {a.exc_value!r}" for a in seen]
