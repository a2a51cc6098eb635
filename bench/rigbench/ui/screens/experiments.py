"""Experiments screen: a relay autotune or a disturbance sweep on one of the board's loops,
with its settings, live progress (cycles as they form), cancel, and the results.

The loop offered first is the innermost loop of a cascade (``primary_loop``), the one a
user tunes first. The experiments are domain code (rigbench.experiments: guards, arming
through the interlock, modes, recording, a safe end) run in a thread worker through
:mod:`rigbench.ui.runners`.
This screen collects the settings, shows progress messages and the result. Kill (ctrl+k,
F9) also cancels; cancel (x) stops in an orderly way and the runner leaves the rig safe.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.message import Message
from textual.widgets import DataTable, Input, Label, ProgressBar, Select, Static

from rigbench.experiments.conventions import primary_loop

from rigbench.ui import guard, runners
from rigbench.ui.results import cycle_row, progress_text, relay_lines, sweep_lines
from rigbench.ui.safety import BenchScreen

# id, label, default; blank amplitude / hysteresis: the experiment sizes them
RELAY_FIELDS = (("amplitude", "amplitude", ""), ("hysteresis", "hysteresis", ""),
                ("bias", "bias", "0"), ("cycles", "cycles", "4"), ("max_s", "max time s", "60"))
SWEEP_FIELDS = (("amplitudes", "step sizes", "0.02, 0.04"), ("repeats", "repeats", "3"),
                ("width_s", "pulse width s", "0.1"))
GAIN_CHOICES = (("current gains", "current"), ("current + best proposal", "best"),
                ("current + 3 best proposals", "top3"))


class ExperimentProgress(Message):
    def __init__(self, progress) -> None:
        super().__init__()
        self.progress = progress


class ExperimentDone(Message):
    def __init__(self, kind: str, result, text: str) -> None:
        super().__init__()
        self.kind, self.result, self.text = kind, result, text


def form_row(label: str, widget) -> Horizontal:
    return Horizontal(Label(label, classes="form-label"), widget, classes="form-row")


class ExperimentsScreen(BenchScreen):
    SUB_TITLE = "Experiments"
    BINDINGS = [
        Binding("r", "start_relay", "Start relay test"),
        Binding("t", "start_sweep", "Start sweep"),
        Binding("x", "cancel", "Cancel"),
    ]

    def __init__(self) -> None:
        super().__init__()
        self.running: str | None = None
        self.cycles_shown = 0

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="exp-top"):
            with Vertical(id="exp-form"):
                yield form_row("loop", Select([], prompt="loop", allow_blank=True,
                                              compact=True, id="exp-loop"))
                yield Label("Relay test (r); blank amplitude/hysteresis: auto-sized",
                            classes="section")
                for fid, label, default in RELAY_FIELDS:
                    yield form_row(label, Input(default, id=f"exp-{fid}", compact=True))
                yield Label("Disturbance sweep (t)", classes="section")
                yield form_row("gain sets", Select(GAIN_CHOICES, value="current",
                                                   allow_blank=False, compact=True,
                                                   id="exp-sets"))
                yield form_row("shape", Select([("pulse", "pulse"), ("step", "step")],
                                               value="pulse", allow_blank=False,
                                               compact=True, id="exp-kind"))
                yield form_row("at", Select([(a, a) for a in ("body", "setpoint", "output")],
                                            value="body", allow_blank=False, compact=True,
                                            id="exp-at"))
                for fid, label, default in SWEEP_FIELDS:
                    yield form_row(label, Input(default, id=f"exp-{fid}", compact=True))
            with Vertical(id="exp-live"):
                yield Label("Progress", classes="section")
                yield ProgressBar(id="exp-bar", show_eta=False, total=1.0)
                yield Static("idle", id="exp-state", markup=False)
                yield DataTable(id="exp-cycle-table", cursor_type="none")
                yield Static("", id="exp-hint", markup=False)
        yield Label("Result", classes="section")
        with VerticalScroll(id="exp-result-box"):  # a long result scrolls, never cut off
            yield Static("No experiment run yet.", id="exp-result", markup=False)

    def on_mount(self) -> None:
        self.query_one("#exp-cycle-table", DataTable).add_columns(
            "cycle", "period s", "amplitude", "Ku", "Δperiod %")
        self.watch(self.app, "link_serial", lambda _: self.setup(), init=False)
        self.setup()

    def setup(self) -> None:
        link = self.app.link
        if link is None:
            return
        pick = self.query_one("#exp-loop", Select)
        first = primary_loop(link.loops, {s.name: s.unit for s in link.signals})
        inner = first.name if len(link.loops) > 1 and not first.ambiguous else None
        pick.set_options([(f"{n}{', innermost' if n == inner else ''} ({lp.plant})", n)
                          for n, lp in link.loops.items()])
        if first.name is not None:
            pick.value = first.name

    def on_select_changed(self, event: Select.Changed) -> None:
        if event.select.id == "exp-loop":
            self.show_hint()

    def show_hint(self) -> None:
        link, loop = self.app.link, self.loop_name()
        if link is None or loop is None:
            return
        lp = link.loops[loop]
        units = {s.name: s.unit for s in link.signals}
        m_unit = units.get(lp.measure, "?")
        amp_unit = m_unit if lp.relay == "integral" else units.get(lp.output, "?")
        where = ("the integral channel, loop closed" if lp.relay == "integral"
                 else "the output")
        self.query_one("#exp-hint", Static).update(
            f"{loop}: measure {lp.measure} ({m_unit}), output {lp.output}. Relay on {where}: "
            f"amplitude in {amp_unit}, hysteresis in {m_unit}. Arms through the board's "
            "interlock; leaves the rig safe.")

    def loop_name(self) -> str | None:
        value = self.query_one("#exp-loop", Select).value
        return None if value is Select.BLANK else str(value)

    def numbers(self, fields) -> dict:
        out = {}
        for fid, label, _ in fields:
            text = self.query_one(f"#exp-{fid}", Input).value.strip()
            try:
                if fid == "amplitudes":
                    out[fid] = tuple(float(x) for x in text.replace(",", " ").split())
                elif fid in ("cycles", "repeats"):
                    out[fid] = int(text)
                elif text:
                    out[fid] = float(text)
                elif fid not in ("amplitude", "hysteresis"):  # blank: the default
                    continue
                else:
                    out[fid] = None  # sized by the experiment
            except ValueError:
                raise ValueError(f"{label}: {text!r} is not a number") from None
        return out

    def gain_sets(self, link, loop: str) -> list:
        names = link.loops[loop].gains
        sets = [("current", {n: link.params[n].value for n in names})]
        choice = self.query_one("#exp-sets", Select).value
        outcome = self.app.last_relay
        if choice != "current" and outcome is not None and outcome.proposals is not None \
                and outcome.loop_name == loop:
            ranked = sorted((p for p in outcome.proposals.proposals if p.rank is not None),
                            key=lambda p: p.rank)
            sets += [(p.rule, dict(p.gains)) for p in ranked[:1 if choice == "best" else 3]]
        elif choice != "current":
            raise ValueError("no proposals for this loop yet: run a relay test first")
        return sets

    # ------------------------------------------------------------------ run

    def _start(self, kind: str) -> None:
        state = self.query_one("#exp-state", Static)
        if self.running:
            state.update(f"a {self.running} test is running (x cancels)")
            return
        link, loop = self.app.need_link(f"{kind} test"), self.loop_name()
        if link is None or loop is None:
            return
        if runners.find(kind) is None:
            state.update(runners.missing_text(kind))
            return
        try:
            if kind == "relay":
                options = dict(loop=loop, **self.numbers(RELAY_FIELDS))
            else:
                options = dict(loop=loop, gain_sets=self.gain_sets(link, loop),
                               kind=self.query_one("#exp-kind", Select).value,
                               at=self.query_one("#exp-at", Select).value,
                               **self.numbers(SWEEP_FIELDS))
        except ValueError as exc:
            state.update(str(exc))
            return
        name = "relay test" if kind == "relay" else "disturbance sweep"
        guard.ask_motor_start(
            self.app, f"Start the {name}?", self.start_text(kind, loop, options),
            f"Start the {name}", lambda: self._launch(kind, link, loop, options),
            cancelled=f"{name} not started: nothing was armed")

    def start_text(self, kind: str, loop: str, options: dict) -> str:
        """What the experiment will do to the motor, in words, for the confirmation."""
        if kind == "relay":
            amp = options.get("amplitude")
            size = f"amplitude {amp:g}" if amp else "an amplitude sized from a short hold"
            return (f"The relay test arms the motor through the board's interlock and "
                    f"switches loop {loop} with {size} until {options.get('cycles', 4)} "
                    f"cycles agree, for at most {options.get('max_s', 60):g} s. Guards kill "
                    "the motor near the trip limits or on a lost link; it ends with the "
                    "motor off or back in the loop it was found in.")
        sets = ", ".join(name for name, _ in options["gain_sets"])
        steps = ", ".join(f"{a:g}" for a in options.get("amplitudes", ()))
        return (f"The sweep arms the motor, holds loop {loop} with each gain set ({sets}) "
                f"and applies {options.get('kind')} disturbances at the {options.get('at')} "
                f"(sizes {steps or 'default'}, {options.get('repeats', 3)} repeats each). "
                "Guards kill the motor near the trip limits or on a lost link.")

    def _launch(self, kind: str, link, loop: str, options: dict) -> None:
        state = self.query_one("#exp-state", Static)
        if self.running or self.app.link is not link:
            state.update("not started: " + (f"a {self.running} test is running"
                                            if self.running else "the link changed"))
            return
        self.running = kind
        self.cycles_shown = 0
        self.query_one("#exp-cycle-table", DataTable).clear()
        self.query_one("#exp-bar", ProgressBar).update(total=1.0, progress=0.0)
        state.update(f"{kind} test on loop {loop} starting…")
        runners.start(self.app, kind, link, options,
                      on_progress=lambda p: self.post_message(ExperimentProgress(p)),
                      on_done=lambda r, t: self.post_message(ExperimentDone(kind, r, t)))
        self.app.note(f"{kind} test started on loop {loop}")

    def action_start_relay(self) -> None:
        self._start("relay")

    def action_start_sweep(self) -> None:
        self._start("sweep")

    def action_cancel(self) -> None:
        state = self.query_one("#exp-state", Static)
        if not self.running:
            state.update("nothing running")
            return
        self.app.cancel_experiments()
        state.update("cancelling: the experiment ends in order and leaves the rig safe…")

    def on_experiment_progress(self, message: ExperimentProgress) -> None:
        p = message.progress
        if p.fraction is not None:
            self.query_one("#exp-bar", ProgressBar).update(progress=p.fraction)
        self.query_one("#exp-state", Static).update(progress_text(p))
        row = cycle_row(p)
        if row is not None and p.cycles > self.cycles_shown:
            self.cycles_shown = p.cycles
            table = self.query_one("#exp-cycle-table", DataTable)
            table.add_row(*row)
            table.scroll_end(animate=False)  # the newest cycle in view

    def on_experiment_done(self, message: ExperimentDone) -> None:
        self.running = None
        self.query_one("#exp-state", Static).update(message.text)
        self.app.note(message.text)
        result = message.result
        if result is None:
            self.query_one("#exp-result", Static).update(message.text)
            return
        if message.kind == "relay":
            self.app.last_relay = result
            lines = relay_lines(result)
        else:
            lines = sweep_lines(result)
        self.query_one("#exp-result", Static).update("\n".join(lines))
