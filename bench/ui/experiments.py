"""Experiments screen: a relay autotune or a disturbance sweep on one of the board's loops,
with its parameters, live progress (cycles as they form), cancel, and the results.

The experiment itself (mode changes, guards, recording, analysis) is domain code run in a
thread worker through :mod:`bench.ui.runners`; this screen collects the parameters, shows
progress messages and the result object, and cancels. Kill (ctrl+k, F9) also cancels.

Must not import: bench.rig, serial, bench.ui.app.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.widgets import Checkbox, DataTable, Input, Label, ProgressBar, Select, Static

from . import runners
from .safety import BenchScreen

FIELDS = (  # id, label, default, what it is
    ("amplitude", "amplitude", "", "relay half step (loop output units, or measure units "
     "for a relay on the integral channel)"),
    ("hysteresis", "hysteresis", "", "in the measure's units"),
    ("bias", "bias", "0", "relay bias (0: symmetric)"),
    ("cycles", "cycles", "6", "whole cycles to collect after settling"),
    ("sweep_amp", "sweep step", "", "disturbance step size per run"),
    ("sweep_time", "step time s", "1", "how long each step lasts"),
)


class ExperimentProgress(Message):
    def __init__(self, progress) -> None:
        super().__init__()
        self.progress = progress


class ExperimentDone(Message):
    def __init__(self, result, text: str) -> None:
        super().__init__()
        self.result, self.text = result, text


def cycle_row(p) -> tuple[str, ...]:
    def f(v, spec=".4g"):
        return "–" if v is None else format(v, spec)

    return (str(p.cycles), f(p.period_s), f(p.amplitude), f(p.ku),
            f(None if p.period_change is None else 100 * p.period_change, ".2g"),
            "settled" if p.settled else "")


def result_lines(result) -> list[str]:
    """The measured figures of a relay result, in words; fields that are missing are left
    out (the runner decides what it measures)."""
    lines = []
    relay = getattr(result, "relay", result)
    conv = getattr(relay, "converged", None)
    if conv is not None:
        lines.append("converged" if conv else f"NOT converged: {relay.reason}")
    for label, attr, unit in (("cycles used", "cycles", ""), ("Ku", "ku", ""),
                              ("Tu", "tu_s", "s"), ("oscillation amplitude", "amplitude", ""),
                              ("static gain", "static_gain", "")):
        v = getattr(relay, attr, None)
        if v is not None:
            lines.append(f"{label:<22} {v:.4g} {unit}".rstrip())
    point = getattr(relay, "point", None)
    if point is not None:
        lines.append(f"{'measured point':<22} gain {point.gain:.4g}, phase "
                     f"{point.phase_deg:.1f}°, at {point.omega_rad_s:.4g} rad/s")
    return lines


class ExperimentsScreen(BenchScreen):
    SUB_TITLE = "Experiments"
    BINDINGS = [
        Binding("r", "start_relay", "Start relay test"),
        Binding("t", "start_sweep", "Start sweep"),
        Binding("x", "cancel", "Cancel"),
    ]

    def __init__(self) -> None:
        super().__init__()
        self.running = False
        self.progress_seen = 0

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="exp-top"):
            with Vertical(id="exp-form"):
                with Horizontal(classes="form-row"):
                    yield Label("loop", classes="form-label")
                    yield Select([], prompt="loop", allow_blank=True, compact=True,
                                 id="exp-loop")
                yield Checkbox("choose amplitude and hysteresis automatically", True,
                               compact=True, id="exp-auto")
                for fid, label, default, _ in FIELDS:
                    with Horizontal(classes="form-row"):
                        yield Label(label, classes="form-label")
                        yield Input(default, id=f"exp-{fid}", type="number", compact=True)
                yield Static("", id="exp-hint", markup=False)
            with Vertical(id="exp-live"):
                yield Label("Progress", classes="section")
                yield ProgressBar(id="exp-bar", show_eta=False)
                yield Static("idle", id="exp-state", markup=False)
                yield DataTable(id="exp-cycles", cursor_type="none")
        yield Label("Result", classes="section")
        yield Static("No experiment run yet.", id="exp-result", markup=False)

    def on_mount(self) -> None:
        self.query_one("#exp-cycles", DataTable).add_columns(
            "cycle", "period s", "amplitude", "Ku", "Δperiod %", "")
        self.watch(self.app, "link_serial", lambda _: self.setup(), init=False)
        self.setup()

    def setup(self) -> None:
        link = self.app.link
        pick = self.query_one("#exp-loop", Select)
        if link is None:
            return
        pick.set_options([(f"{n} ({lp.plant}, relay on {lp.relay})", n)
                          for n, lp in link.loops.items()])
        if link.loops:
            pick.value = next(iter(link.loops))
        self.show_hint()

    def on_select_changed(self, event: Select.Changed) -> None:
        self.show_hint()

    def show_hint(self) -> None:
        link = self.app.link
        loop = self.loop_name()
        if link is None or loop is None:
            return
        lp = link.loops[loop]
        units = {s.name: s.unit for s in link.signals}
        amp_unit = units.get(lp.measure if lp.relay == "integral" else lp.output, "?")
        self.query_one("#exp-hint", Static).update(
            f"loop {loop}: measure {lp.measure} ({units.get(lp.measure, '?')}), output "
            f"{lp.output}; amplitude in {amp_unit}, hysteresis in "
            f"{units.get(lp.measure, '?')}. Needs the motor armed (a).")

    def loop_name(self) -> str | None:
        value = self.query_one("#exp-loop", Select).value
        return None if value is Select.BLANK else str(value)

    def numbers(self) -> dict[str, float | None]:
        out = {}
        for fid, label, _, _ in FIELDS:
            text = self.query_one(f"#exp-{fid}", Input).value.strip()
            try:
                out[fid] = float(text) if text else None
            except ValueError:
                raise ValueError(f"{label}: {text!r} is not a number") from None
        return out

    # ------------------------------------------------------------------ run

    def _start(self, kind: str) -> None:
        if self.running:
            self.notify("An experiment is already running (x cancels).", severity="warning")
            return
        link = self.app.need_link(f"{kind} test")
        loop = self.loop_name()
        if link is None or loop is None:
            return
        try:
            values = self.numbers()
        except ValueError as exc:
            self.query_one("#exp-state", Static).update(str(exc))
            return
        auto = self.query_one("#exp-auto", Checkbox).value
        runner = runners.find(kind)
        if runner is None:
            self.query_one("#exp-state", Static).update(runners.missing_text(kind))
            self.app.note(f"{kind}: {runners.missing_text(kind)}")
            return
        self.running = True
        self.progress_seen = 0
        self.query_one("#exp-cycles", DataTable).clear()
        self.query_one("#exp-bar", ProgressBar).update(total=values.get("cycles") or 6,
                                                        progress=0)
        self.query_one("#exp-state", Static).update(f"{kind} test on loop {loop} running…")
        options = dict(loop=loop, auto=auto, **values)
        worker = runners.run_in_worker(self, kind, runner, link, options,
                                       on_progress=lambda p: self.post_message(
                                           ExperimentProgress(p)),
                                       on_done=lambda r, t: self.post_message(
                                           ExperimentDone(r, t)))
        self.app.note(f"{kind} test started on loop {loop} ({worker.name})")

    def action_start_relay(self) -> None:
        self._start("relay")

    def action_start_sweep(self) -> None:
        self._start("sweep")

    def action_cancel(self) -> None:
        if not self.running:
            self.query_one("#exp-state", Static).update("nothing running")
            return
        self.app.workers.cancel_group(self.app, "experiment")
        self.query_one("#exp-state", Static).update("cancelling: the runner leaves the "
                                                    "motor safe (mode off)…")

    def on_experiment_progress(self, message: ExperimentProgress) -> None:
        p = message.progress
        if hasattr(p, "cycles"):
            table = self.query_one("#exp-cycles", DataTable)
            while self.progress_seen < p.cycles:
                self.progress_seen += 1
                table.add_row(*cycle_row(p))
            self.query_one("#exp-bar", ProgressBar).update(progress=p.cycles)
        text = getattr(p, "text", None)
        if text:
            self.query_one("#exp-state", Static).update(text)

    def on_experiment_done(self, message: ExperimentDone) -> None:
        self.running = False
        self.query_one("#exp-state", Static).update(message.text)
        self.app.note(message.text)
        if message.result is None:
            return
        self.app.last_result = message.result
        lines = result_lines(message.result)
        n = len(getattr(message.result, "proposals", None) or [])
        lines.append(f"{n} proposals with predicted margins: see the Gains screen (3)."
                     if n else "No proposals.")
        self.query_one("#exp-result", Static).update("\n".join(lines))
