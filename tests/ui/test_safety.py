"""The kill key works everywhere and the safety bar shows the board's answer; arming asks and
shows the board's refusal in words; a lost link turns the bar into an alarm.

Expected behaviour is the protocol's (protocol/PROTOCOL.md §7.1 kill, §7.3 interlock) and
README.md, The terminal UI; the board is the simulated one, so its replies are the real code path.
"""

import asyncio

import pytest
from textual.widgets import Input

from rigbench.ui.app import RigApp
from rigbench.ui.widgets.dialogs import ConfirmDialog, PromptDialog
from rigbench.ui.safety import SafetyBar

from conftest import SIM, SIZE, connected, press, wait_for


def tripped_by_kill(app) -> bool:
    s = app.safety
    return s.motor == "tripped" and s.fault == "kill"


def showing(app, screen_cls) -> bool:
    """``screen_cls`` is in front and composed (its safety bar is there)."""
    return isinstance(app.screen, screen_cls) and bool(app.screen.query(SafetyBar))


def bar_text(app) -> str:
    return app.screen.query_one(SafetyBar).text


async def kill_and_check(pilot, key: str) -> None:
    app = pilot.app
    sent = app.kills_sent
    await press(pilot, key)
    assert app.kills_sent == sent + 1  # sent at once, on the key press
    assert await wait_for(pilot, lambda: tripped_by_kill(app)), app.safety
    await pilot.pause(0.05)
    assert "tripped: kill" in bar_text(app)  # the bar on the screen in front shows it


async def clear_fault(pilot) -> None:
    app = pilot.app
    app.board_command("clear", lambda link: link.clear())
    assert await wait_for(pilot, lambda: app.safety.motor == "off"), app.safety


def run(coro):
    return asyncio.run(coro)


def test_kill_from_every_screen_with_an_input_focused_and_in_dialogs(make_app):
    async def go():
        app = make_app()
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            for i, mode in enumerate(RigApp.MODES):
                await app.switch_mode(mode)
                await pilot.pause(0.05)
                await kill_and_check(pilot, "ctrl+k" if i % 2 == 0 else "f9")
                await clear_fault(pilot)
            # a text field with focus on the Experiments screen
            await app.switch_mode("experiments")
            await pilot.pause(0.05)
            field = app.screen.query_one("#exp-amplitude", Input)
            field.focus()
            await press(pilot, "1", "2")
            assert field.value == "12"  # the field takes printable keys...
            await kill_and_check(pilot, "ctrl+k")  # ...and the kill still fires
            assert field.value == "12"
            await clear_fault(pilot)
            # the arm confirmation dialog (the bar is over it: kill_and_check reads it)
            app.set_focus(None)
            await press(pilot, "a")
            assert await wait_for(pilot, lambda: showing(app, ConfirmDialog))
            await kill_and_check(pilot, "f9")
            await press(pilot, "escape")
            await clear_fault(pilot)
            # a dialog whose text field has focus
            app.push_screen(PromptDialog("value", "type"))
            assert await wait_for(pilot, lambda: isinstance(app.focused, Input))
            assert isinstance(app.screen, PromptDialog)
            await kill_and_check(pilot, "ctrl+k")
    run(go())


def test_arm_asks_then_shows_the_refusal_reason(make_app):
    async def go():
        app = make_app()
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            await kill_and_check(pilot, "ctrl+k")  # a latched fault: arm must be refused
            # the next status frame lists the failing arm condition, in words
            assert await wait_for(
                pilot, lambda: "a fault is latched (clear it first)" in app.safety.why)
            await press(pilot, "a")
            assert await wait_for(pilot, lambda: showing(app, ConfirmDialog))
            await press(pilot, "enter")  # focus starts on Cancel: a stray enter does not arm
            assert await wait_for(pilot, lambda: not isinstance(app.screen, ConfirmDialog))
            assert "arming cancelled" in app.note_text
            await press(pilot, "a")
            assert await wait_for(pilot, lambda: showing(app, ConfirmDialog))
            await press(pilot, "tab", "enter")  # the deliberate choice
            assert await wait_for(pilot, lambda: "arm refused" in app.note_text)
            assert "a fault is latched" in app.note_text
            await pilot.pause(0.05)
            assert "arm refused: interlock: a fault is latched" in bar_text(app)
            assert app.safety.motor == "tripped"
    run(go())


@pytest.mark.parametrize("fault, words", [("unplug=0.5", "LINK LOST"),
                                          ("stall=0.5:30", "TELEMETRY STALE")])
def test_lost_or_stale_link_turns_the_bar_into_an_alarm(make_app, fault, words):
    async def go():
        app = make_app(f"{SIM}&{fault}")
        async with app.run_test(size=SIZE) as pilot:
            assert await wait_for(pilot, lambda: words in app.safety.alarm, turns=800), \
                app.safety
            await pilot.pause(0.05)
            bar = app.screen.query_one(SafetyBar)
            assert bar.has_class("-alarm")
            assert words in bar.text
    run(go())


def test_open_failure_is_told_in_words(make_app):
    async def go():
        app = make_app("/dev/no-such-port-here")
        async with app.run_test(size=SIZE) as pilot:
            assert await wait_for(pilot, lambda: app.safety.link == "failed")
            assert app.safety.alarm == "NO LINK"
            assert "not found" in app.safety.alarm_detail
            assert "Traceback" not in app.safety.alarm_detail
    run(go())


def test_lost_link_kill_not_delivered_motor_unknown_arming_refused(make_app):
    # PROTOCOL.md §7: a kill is bytes on the link; with the link gone only the hardware
    # cut-off can stop the motor, and nothing the board said before still holds
    async def go():
        app = make_app(f"{SIM}&unplug=1.5")
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            app.link.arm()
            app.link.mode("hold")
            assert await wait_for(pilot, lambda: app.safety.motor == "running")
            assert await wait_for(pilot, lambda: app.safety.kill_blocked, turns=1500)
            await pilot.pause(0.05)
            for mode in ("live", "experiments"):
                await app.switch_mode(mode)
                await pilot.pause(0.05)
                text = bar_text(app)
                assert "KILL NOT DELIVERED — USE THE HARDWARE CUT-OFF" in text, text
                assert "MOTOR unknown" in text and "last known" not in text
                assert "ctrl+r" in text  # how the link comes back
            assert app.safety.motor == "unknown"
            sent = app.kills_sent
            await press(pilot, "f9")
            assert app.kills_sent == sent  # nothing could be sent...
            assert "KILL NOT SENT (the link is lost): use the hardware cut-off" in app.note_text
            await pilot.pause(0.05)
            assert "KILL NOT SENT" in bar_text(app)  # ...and the bar says so
            app.set_focus(None)
            await press(pilot, "a")
            await pilot.pause(0.1)
            assert not isinstance(app.screen, ConfirmDialog)  # no Arm button to press
            assert "Arm the motor refused: the link is lost" in app.note_text
            await app.switch_mode("experiments")
            await pilot.pause(0.05)
            app.set_focus(None)
            await press(pilot, "r")
            await pilot.pause(0.1)
            assert not isinstance(app.screen, ConfirmDialog)
            assert "refused: the link is lost" in app.note_text
    run(go())
