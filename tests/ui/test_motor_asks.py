"""Every action of the UI that can move the motor asks first, the same way as arming (the
interlock now, and that a software kill is not an emergency stop), whether it comes from a
key or from the command palette; Cancel leaves the motor off and starts nothing. Quitting
with the motor armed asks; quitting disarms and stops the telemetry stream.

Expected behaviour: the project's safety rule (README "Safety first": every action that can
move a motor asks first; common practice, no source) and PROTOCOL.md §7 (kill, interlock).
"""

import asyncio

import pytest
from textual.command import CommandPalette
from textual.widgets import Input, Static

from rigbench.ui.widgets.dialogs import ConfirmDialog

from conftest import SIM, SIZE, connected, press, wait_for

WHEEL = "sim://wheel?clock=virtual"
SEQUENCE = """\
sequence: 1
name: short hold
rig: wheel
guards: {wheel_fraction: 0.9}
on_abort: disarm
steps:
  - arm
  - hold
  - wait: 0.5
  - disarm
"""


def dialog_body(app) -> str:
    return str(app.screen.query_one(".dialog-body", Static).content)


def asking(app) -> bool:
    """A confirmation is in front and composed (its text is there)."""
    return isinstance(app.screen, ConfirmDialog) and bool(app.screen.query(".dialog-body"))


def nothing_started(app) -> bool:
    status = app.link.last_status
    screen_running = getattr(app.screen, "running", None)
    return (app.safety.motor == "off" and status is not None and status.mode == "off"
            and not screen_running and not app.cancel_events)


async def prepare(app, pilot, mode: str, tmp_path) -> None:
    await app.switch_mode(mode)
    await pilot.pause(0.05)
    if mode == "sequences":
        path = tmp_path / "hold.yaml"
        path.write_text(SEQUENCE)
        app.screen.query_one("#seq-path", Input).value = str(path)
    app.set_focus(None)


async def asked_and_cancelled(app, pilot, start) -> None:
    """``start()`` opens the question; Cancel (the focused button) starts nothing."""
    assert nothing_started(app), app.safety
    await start()
    assert await wait_for(pilot, lambda: asking(app)), (
        app.note_text, [str(w.content) for w in app.screen.query(Static)][:12])
    body = dialog_body(app)
    assert "not an emergency stop" in body and "hardware cut-off" in body
    assert "interlock" in body  # the board's arm conditions now, in words
    await pilot.pause(0.2)  # the board would have had time to move
    assert nothing_started(app)  # asking moved nothing
    await press(pilot, "enter")  # focus starts on Cancel
    assert await wait_for(pilot, lambda: not isinstance(app.screen, ConfirmDialog))
    await pilot.pause(0.2)
    assert nothing_started(app), (app.safety, app.note_text)
    assert "cancelled" in app.note_text or "not started" in app.note_text


# (screen, key) for each key that can move the motor
KEYS = [("live", "a"), ("live", "h"), ("experiments", "r"), ("experiments", "t"),
        ("sequences", "r")]
# (screen the palette is opened on, words typed, title of the entry)
PALETTE = [("live", "Arm the motor", "Arm the motor…"),
           ("live", "Hold: closed", "Hold: closed loop with the current gains"),
           ("live", "Start the relay", "Start the relay autotune"),
           ("gains", "Start the disturbance", "Start the disturbance sweep"),
           ("sequences", "Run the chosen", "Run the chosen sequence")]


def test_every_key_that_moves_the_motor_asks_and_cancel_leaves_it_off(make_app, tmp_path):
    async def go():
        app = make_app(WHEEL)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            for mode, key in KEYS:
                await prepare(app, pilot, mode, tmp_path)

                async def start():
                    await press(pilot, key)
                await asked_and_cancelled(app, pilot, start)
    asyncio.run(go())


def test_every_palette_entry_that_moves_the_motor_asks(make_app, tmp_path):
    async def go():
        app = make_app(WHEEL)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            for mode, typed, title in PALETTE:
                await prepare(app, pilot, mode, tmp_path)

                async def start():
                    await press(pilot, "ctrl+p")
                    assert await wait_for(pilot, lambda: isinstance(app.screen, CommandPalette))
                    await press(pilot, *typed)
                    # the entry is found by name, highlighted first, and chosen with enter
                    assert await wait_for(pilot, lambda: title in str(
                        app.screen.query_one("CommandList").get_option_at_index(0).prompt))
                    await press(pilot, "enter")
                await asked_and_cancelled(app, pilot, start)
    asyncio.run(go())


def test_a_deliberate_yes_starts_the_sweep(make_app):
    async def go():
        app = make_app(WHEEL)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            await app.switch_mode("experiments")
            await pilot.pause(0.05)
            app.set_focus(None)
            await press(pilot, "t")
            assert await wait_for(pilot, lambda: asking(app))
            assert "sweep arms the motor" in dialog_body(app)
            await press(pilot, "tab", "enter")
            screen = app.screen
            assert await wait_for(pilot, lambda: app.safety.motor in ("armed", "running"),
                                  turns=2000), app.note_text
            await press(pilot, "x")
            assert await wait_for(pilot, lambda: screen.running is None, turns=3000)
            assert await wait_for(pilot, lambda: app.safety.motor in ("off", "tripped"))
    asyncio.run(go())


def sent(link, cursor: int) -> list[str]:
    """Frames the host wrote since ``cursor`` (the link's raw tap), heartbeats left out."""
    _, lines = link.raw_since(cursor)
    return [ln.text for ln in lines if ln.direction == ">" and " hb" not in ln.text]


@pytest.mark.parametrize("answer", ["cancel", "quit"])
def test_quit_with_the_motor_armed_asks_then_disarms_and_stops_the_stream(make_app, answer):
    async def go():
        app = make_app(SIM)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            link = app.link
            link.arm()
            assert await wait_for(pilot, lambda: app.safety.motor == "armed")
            cursor = link.raw_cursor()
            await press(pilot, "ctrl+q")
            assert await wait_for(pilot, lambda: asking(app))
            assert "disarms it and stops the telemetry stream" in dialog_body(app)
            if answer == "cancel":
                await press(pilot, "escape")
                assert await wait_for(pilot, lambda: not isinstance(app.screen, ConfirmDialog))
                assert app.is_running and app.link is link
                assert app.safety.motor == "armed" and "quit cancelled" in app.note_text
                link.disarm()
                return
            await press(pilot, "tab", "enter")
            assert await wait_for(pilot, lambda: app.link is None)
        frames = sent(link, cursor)
        verbs = [f.split()[0].lstrip("@") for f in frames]
        assert "disarm" in verbs and "stream" in verbs, frames
        assert verbs.index("disarm") < verbs.index("stream")  # the motor first
        stream = frames[verbs.index("stream")]
        assert "rate_hz=0" in stream, stream
        assert link.motor_state == "off"
    asyncio.run(go())


def test_quit_with_the_motor_off_stops_the_stream_without_asking(make_app):
    async def go():
        app = make_app(SIM)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            link = app.link
            cursor = link.raw_cursor()
            await press(pilot, "ctrl+q")
            assert await wait_for(pilot, lambda: app.link is None)
        frames = sent(link, cursor)
        assert any(f.startswith("@stream") and "rate_hz=0" in f for f in frames), frames
        assert not any(f.startswith("@disarm") for f in frames)
    asyncio.run(go())
