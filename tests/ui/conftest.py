"""Helpers for UI tests: the app on a virtual-clock simulated board, and waiting for state.

Waiting loops are bounded by a number of event-loop turns, not by a time: they exist so the
app can process the worker and link messages; assertions are on the state reached.
"""

import unicodedata

import pytest
from textual import events
from textual.keys import REPLACED_KEYS, _character_to_key, _get_unicode_name_from_key

from rigbench.ui.app import RigApp

SIM = "sim://balance?clock=virtual"
SIZE = (130, 42)


async def wait_for(pilot, predicate, *, turns: int = 400, step_s: float = 0.01) -> bool:
    """Let the app run until ``predicate()`` holds (True) or ``turns`` are used (False)."""
    for _ in range(turns):
        if predicate():
            return True
        await pilot.pause(step_s)
    return predicate()


async def press(pilot, *keys: str) -> None:
    """Send key presses through the app's driver exactly as ``Pilot.press`` builds them, but
    without its wait for an idle process: a simulated board keeps the process busy, and
    that wait would cost a second per key. Each key is then given a few event-loop turns."""
    app = pilot.app
    for key in keys:
        if len(key) == 1 and not key.isalnum():
            key = _character_to_key(key)
        try:
            char = unicodedata.lookup(_get_unicode_name_from_key(REPLACED_KEYS.get(key, key)))
        except KeyError:
            char = key if len(key) == 1 else None
        event = events.Key(key, char)
        event.set_sender(app)
        app._driver.send_message(event)
        await pilot.pause(0.02)


async def connected(pilot) -> bool:
    app = pilot.app
    return await wait_for(pilot, lambda: app.link is not None and app.safety.link == "ok"
                          and app.safety.motor != "unknown")


@pytest.fixture
def make_app():
    apps = []

    def make(url: str = SIM, **kwargs) -> RigApp:
        app = RigApp(url, **kwargs)
        apps.append(app)
        return app

    yield make
    for app in apps:
        app.close_link()
