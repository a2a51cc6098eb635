"""Fixtures for link tests: a fake board behind a virtual-clock port; ``link`` uses the
``thread_errors`` guard of tests/conftest.py (no link thread ends with an unhandled
exception)."""

import pytest
from fake_board import FakeBoard, FakePort

from rigbench.link import Link


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
