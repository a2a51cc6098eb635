"""Live view: scrolling plots of the board's signals with readouts and trip headroom.

A timer at ``refresh_hz`` (25 Hz) copies the newest window out of the link's telemetry ring
and redraws; nothing is posted per telemetry line (DEVELOPERS.md, Practice notes: a message
per line costs half a core at 2 kHz). Each plot shows one declared signal, chosen from a
list; the first choices are the loops' measures and the signals with a trip limit
(``trip_<signal>``).
"""

from __future__ import annotations

import time

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Select, Static

from rigbench.ui.widgets.fixedtext import FixedText
from rigbench.ui.widgets.plot import LinePlot, Scale
from rigbench.ui.safety import BenchScreen
from rigbench.ui.view import (WINDOWS_S, auto_scale, default_signals, fixed_scale, format_value,
                   headroom_text, readout)

CAUTION = ("A software kill is not an emergency stop: keep the hardware cut-off within "
           "reach whenever the motor has power.")
N_PLOTS = 3


class PlotPanel(Vertical):
    """A title line (signal, value, headroom) above a line plot, with its signal picker."""

    DEFAULT_CSS = """
    PlotPanel { height: 1fr; min-height: 5; }
    PlotPanel > Horizontal { height: 1; }
    PlotPanel .plot-title { width: 1fr; padding: 0 1; text-style: bold; }
    PlotPanel Select { width: 22; }
    """

    def __init__(self, index: int) -> None:
        super().__init__(id=f"panel-{index}")
        self.index = index
        self.signal: str | None = None

    def compose(self) -> ComposeResult:
        with Horizontal():
            yield FixedText(classes="plot-title")
            yield Select([], prompt="signal", allow_blank=True, compact=True,
                         id=f"pick-{self.index}")
        yield LinePlot(id=f"plot-{self.index}")


class LiveScreen(BenchScreen):
    """Plots, readouts and the caution line: the first screen a newcomer sees."""

    SUB_TITLE = "Live"
    AUTO_FOCUS = ""  # nothing focused: keys go to the screen (space pauses)
    BINDINGS = [
        Binding("space", "pause", "Pause/resume"),
        Binding("w", "window", "Window"),
        Binding("s", "scale", "Auto/fixed scale"),
    ]

    def __init__(self, *, refresh_hz: float = 25.0, text_every: int = 5) -> None:
        super().__init__()
        self.refresh_hz = refresh_hz
        self.text_every = text_every
        self.window_s = 10.0
        self.paused = False
        self.fixed = False
        self.redraws = 0  # for the benchmark script: redraws done
        self.last_rows = 0  # rows in the last window drawn
        self.last_cursor = -1  # ring cursor of the last window drawn
        self.backlog_rows = 0  # rows received since the previous window drawn (at a redraw)
        self.redraw_seconds = 0.0  # time spent in refresh_plots (for the benchmark script)
        self._layout_key = None
        self._scales: dict[str, tuple[float, float]] = {}

    def compose_body(self) -> ComposeResult:
        yield Static(CAUTION, id="caution", markup=False)
        yield FixedText(id="live-state")
        with Horizontal(id="live-body"):
            with Vertical(id="plots"):
                for i in range(N_PLOTS):
                    yield PlotPanel(i)
            yield FixedText(id="readouts")

    def on_mount(self) -> None:
        # widgets looked up once: a DOM query per redraw costs more than a plot
        self._panels = [(p, p.query_one(".plot-title", FixedText), p.query_one(LinePlot))
                        for p in self.query(PlotPanel)]
        self._readouts = self.query_one("#readouts", FixedText)
        self.set_interval(1.0 / self.refresh_hz, self.refresh_plots)
        self._show_state()

    # ------------------------------------------------------------------ actions

    def action_pause(self) -> None:
        self.paused = not self.paused
        self._show_state()

    def action_window(self) -> None:
        i = WINDOWS_S.index(self.window_s) if self.window_s in WINDOWS_S else 0
        self.window_s = WINDOWS_S[(i + 1) % len(WINDOWS_S)]
        self._show_state()
        self.refresh_plots(force=True)

    def action_scale(self) -> None:
        self.fixed = not self.fixed
        self._show_state()
        self.refresh_plots(force=True)

    def _show_state(self) -> None:
        scale = "fixed (± trip limit where declared)" if self.fixed else "auto"
        run = "PAUSED (space resumes)" if self.paused else "live"
        self.query_one("#live-state", FixedText).set_text(
            f"{run}   window {self.window_s:g} s (w)   scale {scale} (s)")

    # ------------------------------------------------------------------ signals

    def _setup_signals(self, link) -> None:
        """Fill the signal pickers from what the board declared (once per link)."""
        names = [s.name for s in link.signals]
        key = (id(link), tuple(names))
        if key == self._layout_key:
            return
        self._layout_key = key
        chosen = default_signals(names, list(link.loops.values()), link.params, N_PLOTS)
        options = [(n, n) for n in names]
        for i, panel in enumerate(self.query(PlotPanel)):
            pick = panel.query_one(Select)
            panel.signal = chosen[i] if i < len(chosen) else None
            # new options blank the value: that Changed would undo the choice (a new link)
            with pick.prevent(Select.Changed):
                pick.set_options(options)
                pick.value = panel.signal if panel.signal else Select.BLANK

    def on_select_changed(self, event: Select.Changed) -> None:
        panel = event.select.parent.parent
        if isinstance(panel, PlotPanel):
            panel.signal = None if event.value is Select.BLANK else str(event.value)
            self.refresh_plots(force=True)

    # ------------------------------------------------------------------ drawing

    def refresh_plots(self, force: bool = False) -> None:
        """Copy the newest window from the ring and redraw (the 25 Hz timer)."""
        if not self.is_current or (self.paused and not force):
            return
        t0 = time.perf_counter()
        try:
            self._redraw()
        finally:
            self.redraw_seconds += time.perf_counter() - t0

    def _redraw(self) -> None:
        link = self.app.link
        if link is None:
            return
        self._setup_signals(link)
        block = self.app.telemetry_window(self.window_s)
        if block is None or len(block) == 0:
            return
        cursor = self.app.telemetry_cursor()
        if self.last_cursor >= 0:
            self.backlog_rows = cursor - self.last_cursor
        self.last_rows, self.last_cursor = len(block), cursor
        t = block.board_time_s
        t1 = float(t[-1])
        t0 = t1 - self.window_s
        units = dict(zip(block.signals, block.units))
        # figures change too fast to read at 25 Hz: every text_every-th redraw is enough
        numbers = self.redraws % self.text_every == 0 or self.paused
        for panel, title, plot in self._panels:
            name = panel.signal
            if not name or name not in units:
                title.set_text("(no signal chosen)")
                plot.show(t, [], t0_s=t0, t1_s=t1, scale=plot.scale)
                continue
            y = block.column(name)
            r = readout(name, units[name], y, link.params)
            if self.fixed:
                low, high = self._scales.setdefault(name, fixed_scale(
                    link.params, name, (plot.scale.low, plot.scale.high)))
            else:
                self._scales.pop(name, None)
                low, high = auto_scale([y])
            if numbers:
                title.set_text(f"{name} {format_value(r.last, r.unit).strip()}   "
                               f"{headroom_text(r)}")
            plot.show(t, [y], t0_s=t0, t1_s=t1, scale=Scale(low, high))
        if numbers:
            self._show_readouts(block, link.params)
        self.redraws += 1

    def _show_readouts(self, block, params) -> None:
        lines = [f"{'signal':<10}{'now':>10}{'min':>10}{'max':>10}"]
        for name, unit in zip(block.signals, block.units):
            r = readout(name, unit, block.column(name), params)
            lines.append(f"{name[:9]:<10}{format_value(r.last, '', 10)}"
                         f"{format_value(r.low, '', 10)}{format_value(r.high, '', 10)}")
            lines.append(f"  {unit}" + (f"   {headroom_text(r, short=True)}"
                                        if r.trip is not None else ""))
        lines.append("")
        lines.append(f"{len(block)} samples in {self.window_s:g} s")
        self._readouts.set_text("\n".join(lines))
