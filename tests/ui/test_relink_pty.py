"""A board on a device path goes away mid-hold and comes back on the same path: the bar says
the kill cannot be delivered, arming is refused, and once the board is back the session
reopens by itself, says the board restarted, and leaves the motor off (never re-armed).

The board is the simulated one on a pseudo-terminal behind a symlink (tests/ptyboard.py),
in real time, so the waits are bounded by turns of the event loop, not by assertions on
time. Expected behaviour: PROTOCOL.md §7 (a kill is bytes on the link; a board boots
disarmed) and the README's safety rules.
"""

import asyncio
import os

import pytest

from rigbench.ui.safety import SafetyBar
from rigbench.ui.screens.live import PlotPanel
from rigbench.ui.widgets.dialogs import ConfirmDialog

from conftest import SIZE, press, wait_for
from ptyboard import PtyBoard

pytestmark = pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs POSIX ptys")

BOOT_TEXT = b"\r\nboot v1.2\r\nselftest ... ok\r\n"


def test_board_gone_mid_hold_then_back_on_the_same_path(make_app, tmp_path):
    path = tmp_path / "board"
    board = PtyBoard("sim://wheel", path, uptime_s=60.0)

    async def go():
        nonlocal board
        app = make_app(str(path), stream_hz=50.0)
        async with app.run_test(size=SIZE) as pilot:
            assert await wait_for(pilot, lambda: app.safety.link == "ok"
                                  and app.safety.motor == "off", turns=1000), app.safety
            first = app.link
            first.arm()  # test setup: the UI's own arm asks (tests/ui/test_motor_asks.py)
            first.mode("hold")
            assert await wait_for(pilot, lambda: app.safety.motor == "running", turns=1000)

            board.stop()  # unplugged mid-hold
            assert await wait_for(pilot, lambda: app.safety.kill_blocked, turns=1000)
            await pilot.pause(0.05)
            bar = app.screen.query_one(SafetyBar).text
            assert "KILL NOT DELIVERED — USE THE HARDWARE CUT-OFF" in bar
            assert "MOTOR unknown" in bar and "running" not in bar
            assert f"reconnects when {path} is back" in bar
            await press(pilot, "f9")
            assert "KILL NOT SENT" in app.note_text
            app.set_focus(None)
            await press(pilot, "a")
            await pilot.pause(0.1)
            assert not isinstance(app.screen, ConfirmDialog)
            assert "refused: the link is lost" in app.note_text

            board = PtyBoard("sim://wheel", path, boot_text=BOOT_TEXT)  # plugged back in
            assert await wait_for(pilot, lambda: app.link is not first
                                  and app.safety.link == "ok", turns=1500), app.safety
            assert await wait_for(pilot, lambda: "link back" in app.note_text)
            assert "the board restarted" in app.note_text, app.note_text
            assert "not re-armed" in app.note_text
            assert await wait_for(pilot, lambda: app.safety.motor == "off")
            assert not app.safety.kill_blocked
            _, lines = app.link.raw_since(0)
            assert not any(ln.text.startswith("@arm") for ln in lines if ln.direction == ">")
            await pilot.pause(0.05)
            assert "KILL ctrl+k or F9" in app.screen.query_one(SafetyBar).text
            # the live plots show the new link's signals, chosen as on the first open
            await pilot.pause(0.3)  # the pickers' messages handled
            assert all(p.signal for p in app.screen.query(PlotPanel))

    try:
        asyncio.run(go())
    finally:
        board.stop()
