"""Fixtures for link tests: a fake board behind a virtual-clock port, and a guard that no
link thread ends with an unhandled exception (a traceback a user would see)."""

import threading

import pytest
from fake_board import FakeBoard, FakePort

from bench.link import Link


@pytest.fixture
def thread_errors(monkeypatch):
    seen = []
    monkeypatch.setattr(threading, "excepthook", lambda args: seen.append(args))
    yield seen
    assert not seen, [f"{a.thread.name}: {a.exc_value!r}" for a in seen]


@pytest.fixture
def board():
    return FakeBoard()


@pytest.fixture
def port(board):
    return FakePort(board)


@pytest.fixture
def link(port, thread_errors):
    lk = Link.attach(port, url="fake://board")
    yield lk
    lk.close()
