"""Live view: 2 kHz telemetry is drawn at the refresh rate without a growing backlog; the
signal pickers, window, pause and scale keys do what they say.

"Backlog" here is state: the rows the ring received since the window last drawn, read just
before each redraw, and the App's message queue. A view that keeps up holds both bounded;
one that falls behind sees them grow redraw after redraw.
"""

import asyncio

import numpy as np

from rigbench.ui.screens.live import LiveScreen
from rigbench.ui.widgets.plot import LinePlot

from conftest import SIM, SIZE, connected, press, wait_for

FAST = SIM + "&rate=2000"  # the board's loop (and telemetry) at 2 kHz


def test_2khz_telemetry_keeps_up_without_backlog(make_app):
    async def go():
        app = make_app(FAST, stream_hz=2000.0)
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            assert app.stream_rate_hz == 2000.0
            live = app.screen
            assert isinstance(live, LiveScreen)
            backlog, queue = [], []
            seen = live.redraws
            while len(backlog) < 45:  # sample the state after each redraw
                assert await wait_for(pilot, lambda: live.redraws > seen, step_s=0.005)
                seen = live.redraws
                backlog.append(live.backlog_rows)
                queue.append(app._message_queue.qsize())
            n = len(backlog) // 3
            first, last = np.array(backlog[:n]), np.array(backlog[-n:])
            # rows between redraws stay of the order of rate / refresh rate, not growing
            assert last.mean() <= 2.0 * first.mean() + 400, (first, last)
            ring = app.link.channel.ingest.ring.size
            assert max(backlog) < ring // 4
            _, block = app.link.read_since(live.last_cursor - 1)
            assert block.skipped == 0  # the view's cursor never fell a ring behind
            assert max(queue[-n:]) <= max(queue[:n]) + 10
            health = app.link.health()
            assert health.lost_frames == 0
            # every row reaches the view: a full window holds window x rate rows
            win = app.telemetry_window(live.window_s)
            span = win.board_time_s[-1] - win.board_time_s[0]
            assert abs(len(win) - span * 2000.0) <= 2
    asyncio.run(go())


def test_live_keys_and_pickers(make_app):
    async def go():
        app = make_app()
        async with app.run_test(size=SIZE) as pilot:
            assert await connected(pilot)
            live = app.screen
            assert await wait_for(pilot, lambda: live.redraws > 3)
            # defaults come from the board's declarations: trip-limited signals first
            panels = [p.signal for p in live.query("PlotPanel")]
            assert panels[:2] == ["tilt", "wheel"]
            title = live.query_one("#panel-1 .plot-title").text
            assert "wheel" in title and "to trip at ±45" in title  # trip_wheel = 45 rev/s
            await press(pilot, "space")
            assert live.paused
            frozen = live.redraws
            await pilot.pause(0.3)
            assert live.redraws == frozen
            await press(pilot, "space", "w")
            assert not live.paused and live.window_s == 30.0
            await press(pilot, "s")
            assert live.fixed
            assert await wait_for(pilot, lambda: live.redraws > frozen + 2)
            plot = live.query_one("#plot-1", LinePlot)  # wheel: fixed scale = ±trip limit
            assert plot.scale.high == -plot.scale.low and plot.scale.high > 45
    asyncio.run(go())
