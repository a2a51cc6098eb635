"""The tuning path through the screens: relay test on the Experiments screen with live
progress and the result, proposals on the Gains screen, a proposal staged, the difference
shown, pushed in one set and read back; a refused edit keeps the old value.

The plant is a first-order lag with dead time, a known stable loop, on the simulated board
with its virtual clock; the numbers themselves are checked in tests/experiments.
"""

import asyncio

from textual.widgets import DataTable, Static

from rigbench.profiles import diff as profile_diff
from rigbench.profiles import model as profiles
from rigbench.ui.widgets.dialogs import ConfirmDialog, PromptDialog
from rigbench.ui.safety import SafetyBar

from conftest import SIZE, connected, press, wait_for

PLANT = "sim://plant?num=1&den=1,1&delay=0.1&clock=virtual"


def showing(app, cls) -> bool:
    return isinstance(app.screen, cls) and bool(app.screen.query(SafetyBar))


def test_relay_then_push_a_proposal(make_app):
    async def go():
        app = make_app(PLANT)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            await app.switch_mode("experiments")
            await pilot.pause(0.05)
            exp = app.screen
            await press(pilot, "r")
            assert await wait_for(pilot, lambda: showing(app, ConfirmDialog))
            assert exp.running is None  # nothing moves before the answer
            await press(pilot, "tab", "enter")
            assert await wait_for(pilot, lambda: exp.running == "relay")
            assert await wait_for(pilot, lambda: exp.running is None, turns=3000)
            outcome = app.last_relay
            assert outcome is not None and outcome.run.converged, exp.query_one(
                "#exp-state", Static).content
            assert exp.query_one("#exp-cycle-table", DataTable).row_count >= 1
            text = str(exp.query_one("#exp-result", Static).content)
            assert "converged" in text and f"Tu {outcome.run.tu_s:.4g} s" in text
            assert "proposals; best:" in text
            assert app.safety.motor == "off"  # the runner left the rig safe

            await app.switch_mode("gains")
            await pilot.pause(0.1)
            gains = app.screen
            table = gains.query_one("#proposals", DataTable)
            assert table.row_count == len(outcome.proposals.proposals) + 1  # + current
            best = outcome.proposals.best()
            index = gains._proposals.index(best)
            table.focus()
            table.move_cursor(row=index)
            assert await wait_for(pilot, lambda: app.focused is table)
            await press(pilot, "enter")
            assert await wait_for(pilot, lambda: gains.pending == {
                k: float(v) for k, v in best.gains.items()}), gains.pending
            await press(pilot, "p")
            assert await wait_for(pilot, lambda: showing(app, ConfirmDialog))
            body = str(app.screen.query_one(".dialog-body", Static).content)
            assert "board now" in body and all(name in body for name in best.gains)
            await press(pilot, "tab", "enter")
            assert await wait_for(pilot, lambda: "read back matches" in
                                  str(gains.query_one("#gains-note", Static).content))
            on_board = app.link.get(*best.gains)
            for name, value in best.gains.items():
                assert profile_diff.same_value(on_board[name], value, digits=6), name
            assert gains.pending == {}
    asyncio.run(go())


def test_edit_outside_the_range_is_refused_in_words(make_app):
    async def go():
        app = make_app(PLANT)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            await app.switch_mode("gains")
            await pilot.pause(0.1)
            gains = app.screen
            table = gains.query_one("#gains-table", DataTable)
            assert table.row_count >= 3
            name = gains.names()[0]
            param = app.link.params[name]
            table.focus()
            table.move_cursor(row=0)
            assert await wait_for(pilot, lambda: app.focused is table)
            await press(pilot, "e")
            assert await wait_for(pilot, lambda: showing(app, PromptDialog))
            field = app.screen.query_one("#answer")
            field.value = f"{param.maximum * 10 + 1:g}"
            await press(pilot, "enter")
            assert await wait_for(pilot, lambda: "outside" in str(
                gains.query_one("#gains-note", Static).content))
            note = str(gains.query_one("#gains-note", Static).content)
            assert "outside" in note and name in note and gains.pending == {}
    asyncio.run(go())


def test_every_palette_entry_names_an_action_that_exists():
    # common practice, no source: a palette entry whose action is missing fails silently
    from rigbench.ui.app import RigApp
    from rigbench.ui.palette import ACTIONS

    for title, _, mode, action in ACTIONS:
        if mode is not None:
            assert mode in RigApp.MODES, title
        if not action:
            continue
        target, _, name = action.partition(".")
        cls = RigApp if target == "app" else RigApp.MODES[mode]
        assert callable(getattr(cls, f"action_{name}", None)), title
