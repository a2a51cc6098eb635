"""Sequences screen: a file is validated (steps listed, errors named with file and line), run
with step progress to a results folder, and aborted with the motor left off."""

import asyncio

from textual.widgets import DataTable, Input, Static

from rigbench.ui.widgets.dialogs import ConfirmDialog

from conftest import SIZE, connected, press, wait_for

WHEEL = "sim://wheel?clock=virtual"

SHORT = """\
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

LONG = SHORT.replace("wait: 0.5", "wait: 600").replace("short hold", "long hold")
BROKEN = SHORT.replace("  - wait: 0.5\n", "  - wait: 0.5\n  - spin: 3\n")


def project(tmp_path, name: str, text: str) -> str:
    folder = tmp_path / "sequences"
    folder.mkdir(exist_ok=True)
    path = folder / name
    path.write_text(text)
    return str(path)


async def open_sequences(app, pilot, path: str):
    await app.switch_mode("sequences")
    await pilot.pause(0.05)
    screen = app.screen
    screen.query_one("#seq-path", Input).value = path
    return screen


async def confirm(pilot) -> None:
    """Answer the motor-start question deliberately (focus starts on Cancel)."""
    app = pilot.app
    assert await wait_for(pilot, lambda: isinstance(app.screen, ConfirmDialog))
    await press(pilot, "tab", "enter")
    assert await wait_for(pilot, lambda: not isinstance(app.screen, ConfirmDialog))


def state_text(screen) -> str:
    return str(screen.query_one("#seq-state", Static).content)


def test_validate_run_and_results(make_app, tmp_path):
    async def go():
        app = make_app(WHEEL)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            screen = await open_sequences(app, pilot, project(tmp_path, "bad.yaml", BROKEN))
            await press(pilot, "v")
            summary = str(screen.query_one("#seq-summary", Static).content)
            assert summary.startswith("NOT VALID") and "bad.yaml" in summary
            assert "spin" in summary

            screen.query_one("#seq-path", Input).value = project(tmp_path, "ok.yaml", SHORT)
            await press(pilot, "v")
            table = screen.query_one("#seq-steps", DataTable)
            assert table.row_count == 4
            await press(pilot, "r")
            await confirm(pilot)
            assert await wait_for(pilot, lambda: not screen.running, turns=2000)
            text = state_text(screen)
            assert "PASSED" in text and "motor after: off" in text, text
            states = [table.get_cell(str(i), "state") for i in range(4)]
            assert states == ["ok"] * 4
            results = list((tmp_path / "results").iterdir())
            assert len(results) == 1 and (results[0] / "summary.yaml").exists()
    asyncio.run(go())


def test_abort_leaves_the_motor_off(make_app, tmp_path):
    async def go():
        app = make_app(WHEEL)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            screen = await open_sequences(app, pilot, project(tmp_path, "long.yaml", LONG))
            await press(pilot, "r")
            await confirm(pilot)
            table = screen.query_one("#seq-steps", DataTable)
            assert await wait_for(pilot, lambda: table.get_cell("2", "state") in
                                  ("start", "running") and app.safety.motor == "running",
                                  turns=2000), (table.get_cell("2", "state"), app.safety)
            await press(pilot, "x")
            assert await wait_for(pilot, lambda: not screen.running, turns=2000)
            assert "NOT PASSED" in state_text(screen)
            # on_abort: disarm -> off (or tripped, had the runner needed the kill)
            assert await wait_for(pilot, lambda: app.safety.motor in ("off", "tripped"))
            assert "motor after: off" in state_text(screen) or app.safety.fault
    asyncio.run(go())
