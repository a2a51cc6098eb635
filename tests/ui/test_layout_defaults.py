"""What the screens offer first and how they fit: the loop offered first is the innermost
loop of a cascade (rigbench.experiments.conventions.primary_loop); the colour theme named on the
command line holds; at 80x24 and 140x42 every screen keeps the kill keys, the motor state
and the link alarm in view and nothing pushes a screen into scrolling.

The sizes are the classic terminal (80x24) and a common laptop window; what must stay in
view is the safety bar on every screen (README.md, The terminal UI)."""

import asyncio
import io

import pytest
from rich.console import Console
from textual.color import Color
from textual.widgets import Select

from rigbench.cli import build_parser
from rigbench.commands import ui as ui_command
from rigbench.ui.app import RigApp
from rigbench.ui.screens.experiments import ExperimentsScreen
from rigbench.ui.screens.gains import GainsScreen
from rigbench.ui.screens.link import health_lines
from rigbench.ui.safety import SafetyBar
from rigbench.ui.theme import BENCH_DARK, BENCH_LIGHT

from conftest import SIM, connected, press, wait_for

SIZES = ((80, 24), (120, 40), (140, 42))


def shown(app, cls) -> bool:
    """``cls`` is in front and composed (its safety bar is there)."""
    return isinstance(app.screen, cls) and bool(app.screen.query(SafetyBar))


def picked(app, cls, select_id: str):
    """The value of the Select ``select_id`` once screen ``cls`` is in front with it."""
    if not shown(app, cls):
        return None
    found = app.screen.query(select_id)
    return found.first(Select).value if found else None


def screen_rows(app) -> list[str]:
    """The screen as the terminal shows it, one string per row."""
    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), record=True,
                      force_terminal=True, color_system=None, legacy_windows=False)
    console.print(app.screen._compositor.render_update(full=True))
    return console.export_text().splitlines()


@pytest.mark.parametrize("url, loop", [(SIM, "tilt"), ("sim://wheel?clock=virtual", "speed")])
def test_experiments_and_gains_screens_offer_the_innermost_loop(make_app, url, loop):
    async def go():
        app = make_app(url)
        async with app.run_test(size=(140, 42)) as pilot:
            assert await connected(pilot)
            await press(pilot, "2")
            assert await wait_for(pilot, lambda: picked(app, ExperimentsScreen, "#exp-loop")
                                  == loop)
            hint = app.screen.query_one("#exp-hint")
            assert await wait_for(pilot, lambda: str(hint.content).startswith(f"{loop}: "))
            await press(pilot, "3")
            assert await wait_for(pilot, lambda: picked(app, GainsScreen, "#gains-loop")
                                  == loop)
            assert app.screen.loop == loop
    asyncio.run(go())


@pytest.mark.parametrize("argv, theme", [(["--theme", "bench-light"], BENCH_LIGHT),
                                         ([], BENCH_DARK)])
def test_the_theme_named_on_the_command_line_is_the_one_shown(argv, theme):
    args = build_parser().parse_args(["ui", "--port", SIM, *argv])
    app = ui_command.make_app(args)

    async def go():
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(0.1)
            assert app.theme == theme.name
            assert app.current_theme.dark is theme.dark
            assert app.screen.styles.background == Color.parse(theme.background)
    try:
        asyncio.run(go())
    finally:
        app.close_link()


def missing_essentials(app, *, alarm: str = "", kill: str = "KILL ctrl+k or F9") -> str:
    """What the screen in front fails to show (empty when all is in view): ``kill`` (the
    kill keys, or that a kill cannot be delivered) and the motor on the bar, ``alarm`` on
    the same row, the quit key in the footer, the whole top bar, no scrolling."""
    if not shown(app, type(app.screen)):
        return "screen not composed yet"
    rows = screen_rows(app)
    where = f"{type(app.screen).__name__} at {app.size}"
    bar = [r for r in rows[-4:] if kill in r]
    if len(rows) != app.size.height or not bar:
        return f"{where}: no {kill!r} in the bottom rows {rows[-4:]}"
    if "MOTOR " not in bar[0] or alarm not in bar[0]:
        return f"{where}: bar lacks the motor or {alarm!r}: {bar[0]}"
    if "^q Quit" not in rows[-1]:                  # the quit key is always offered
        return f"{where}: no quit key in the footer: {rows[-1]}"
    if "F1 Help" not in rows[0]:                   # no scrollbar narrowing the top bar
        return f"{where}: top bar cut: {rows[0]}"
    if app.screen.max_scroll_y:                    # nothing overflows the screen
        return f"{where}: the screen scrolls by {app.screen.max_scroll_y} rows"
    return ""


async def essentials_in_view(pilot, **what) -> None:
    """Let the screen fill in (the link's loops, hints), wait (bounded) for the layout to
    settle, then check; the message says what is cut."""
    app = pilot.app
    await pilot.pause(0.2)
    await wait_for(pilot, lambda: not missing_essentials(app, **what), turns=100)
    assert not missing_essentials(app, **what), missing_essentials(app, **what)


def test_every_screen_keeps_kill_motor_and_top_bar_in_view(make_app):
    async def go():
        app = make_app()
        async with app.run_test(size=SIZES[0]) as pilot:
            assert await connected(pilot)
            for size in SIZES:                        # a resize on the way, too
                await pilot.resize_terminal(*size)
                for mode in RigApp.MODES:
                    await app.switch_mode(mode)
                    await essentials_in_view(pilot)
            # at 80 columns the columns that share the width stay readable
            await pilot.resize_terminal(*SIZES[0])
            await app.switch_mode("experiments")
            live = app.screen.query_one("#exp-live")
            assert await wait_for(pilot, lambda: live.region.width >= 36), live.region
            await app.switch_mode("link")
            box = app.screen.query_one("#link-health-box")
            assert await wait_for(pilot, lambda: box.region.width >= 42), box.region
            assert box.region.height >= 8
            assert app.screen.query_one("#console").region.height >= 4
            # 42 columns less 1 border, 1 padding, 1 scrollbar: 39 for each line
            lines = health_lines(app.link, app.stream_rate_hz)
            assert max(len(line) for line in lines) <= 39, max(lines, key=len)
    asyncio.run(go())


def test_the_link_alarm_shows_on_every_screen_at_80_columns(make_app):
    async def go():
        app = make_app(f"{SIM}&unplug=0.5")
        async with app.run_test(size=(80, 24)) as pilot:
            assert await wait_for(pilot, lambda: "LINK LOST" in app.safety.alarm, turns=800)
            for mode in RigApp.MODES:
                await app.switch_mode(mode)
                await essentials_in_view(pilot, alarm="LINK LOST",
                                         kill="KILL NOT DELIVERED — USE THE HARDWARE CUT-OFF")
                assert "MOTOR unknown" in screen_rows(app)[-3]
    asyncio.run(go())
