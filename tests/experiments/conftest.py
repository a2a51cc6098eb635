"""Fixtures for experiment tests: simulated boards on the virtual clock, opened and closed
per test, with the board object at hand (``link.port.board``) for the true plant."""

import pytest

from rigbench.link import Link


def _opener():
    links = []

    def _open(url: str) -> Link:
        if "clock=" not in url:
            url += ("&" if "?" in url else "?") + "clock=virtual"
        link = Link.open(url)
        links.append(link)
        return link

    return _open, links


@pytest.fixture
def open_sim():
    """Open a sim:// URL on the virtual clock; closed after the test."""
    _open, links = _opener()
    yield _open
    for link in links:
        link.close()


@pytest.fixture(scope="module")
def open_sim_shared():
    """Like open_sim, but the links live as long as the test module (cached runs)."""
    _open, links = _opener()
    yield _open
    for link in links:
        link.close()
