"""Sequences screen: pick a sequence file, validate it (every step listed in run order),
run it with step progress, abort (motor off).

Reading and checking a file is bench.sequence_file; running it is the domain runner found
through :mod:`bench.ui.runners`. Abort cancels the runner's worker and sends ``disarm``.

Must not import: bench.rig, serial, bench.ui.app.
"""

from __future__ import annotations

from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.widgets import DataTable, Input, Label, OptionList, ProgressBar, Static
from textual.widgets.option_list import Option

from bench import sequence_file

from . import runners
from .safety import BenchScreen


class SequenceProgress(Message):
    def __init__(self, progress) -> None:
        super().__init__()
        self.progress = progress


class SequenceDone(Message):
    def __init__(self, result, text: str) -> None:
        super().__init__()
        self.result, self.text = result, text


def step_text(step) -> str:
    """One step's settings in a line (its dataclass fields, less bookkeeping)."""
    skip = {"kind", "index", "line", "where", "guards", "bindings", "timeout_s"}
    parts = []
    for name, value in vars(step).items():
        if name not in skip and value not in (None, (), "", {}):
            parts.append(f"{name}={value}")
    return " ".join(parts)[:90]


class SequencesScreen(BenchScreen):
    SUB_TITLE = "Sequences"
    BINDINGS = [
        Binding("v", "validate", "Validate"),
        Binding("r", "run", "Run"),
        Binding("x", "abort", "Abort (motor off)"),
        Binding("u", "rescan", "Rescan files"),
    ]

    def __init__(self, *, folder: str | Path = "sequences") -> None:
        super().__init__()
        self.folder = Path(folder)
        self.sequence = None
        self.steps: list = []
        self.running = False

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="seq-top"):
            with Vertical(id="seq-files"):
                yield Label(f"Sequence files in {self.folder}/", classes="section")
                yield OptionList(id="seq-list")
                yield Input(placeholder="or type a path to a sequence file", id="seq-path",
                            compact=True)
            with Vertical(id="seq-info"):
                yield Static("Choose a file, then validate (v).", id="seq-summary",
                             markup=False)
                yield ProgressBar(id="seq-bar", show_eta=False)
                yield Static("", id="seq-state", markup=False)
        yield DataTable(id="seq-steps", cursor_type="row")

    def on_mount(self) -> None:
        self.query_one("#seq-steps", DataTable).add_columns("step", "kind", "line",
                                                            "settings", "state")
        self.action_rescan()

    def action_rescan(self) -> None:
        files = sorted(self.folder.glob("*.yaml")) + sorted(self.folder.glob("*.yml"))
        ol = self.query_one("#seq-list", OptionList)
        ol.clear_options()
        for f in files:
            ol.add_option(Option(f.name, id=str(f)))
        if not files:
            ol.add_option(Option(f"(no .yaml files in {self.folder}/)", disabled=True))

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        if event.option.id:
            self.query_one("#seq-path", Input).value = event.option.id

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        if event.option.id:
            self.query_one("#seq-path", Input).value = event.option.id
            self.action_validate()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.action_validate()

    def _state(self, text: str) -> None:
        self.query_one("#seq-state", Static).update(text)

    def action_validate(self) -> bool:
        path = self.query_one("#seq-path", Input).value.strip()
        table = self.query_one("#seq-steps", DataTable)
        table.clear()
        self.sequence, self.steps = None, []
        if not path:
            self._state("Choose a sequence file first.")
            return False
        try:
            seq = sequence_file.load_sequence(path)
            steps = sequence_file.expand(seq)
        except Exception as exc:  # noqa: BLE001 - SchemaError names file, line and step
            self.query_one("#seq-summary", Static).update(f"NOT VALID\n{exc}")
            self._state("")
            return False
        self.sequence, self.steps = seq, steps
        for i, st in enumerate(steps):
            table.add_row(st.index, st.kind, str(st.line), step_text(st), "", key=str(i))
        link = self.app.link
        rig_note = ""
        if seq.rig and link is not None and link.info.rig != seq.rig:
            rig_note = f"\nWARNING: written for a {seq.rig!r} rig; the board is {link.info.rig!r}"
        self.query_one("#seq-summary", Static).update(
            f"{seq.name}: valid, {len(steps)} steps in run order; on abort: {seq.on_abort}"
            f"{rig_note}" + (f"\n{seq.notes.strip()}" if seq.notes else ""))
        self.query_one("#seq-bar", ProgressBar).update(total=len(steps), progress=0)
        self._state("ready to run (r)")
        return True

    def action_run(self) -> None:
        if self.running:
            self._state("already running (x aborts)")
            return
        if not self.action_validate():
            return
        link = self.app.need_link("run sequence")
        if link is None:
            return
        runner = runners.find("sequence")
        if runner is None:
            self._state(runners.missing_text("sequence"))
            self.app.note(f"sequence: {runners.missing_text('sequence')}")
            return
        self.running = True
        self._state(f"running {self.sequence.name}…")
        runners.run_in_worker(self, "sequence", runner, link, {"sequence": self.sequence},
                              on_progress=lambda p: self.post_message(SequenceProgress(p)),
                              on_done=lambda r, t: self.post_message(SequenceDone(r, t)))

    def action_abort(self) -> None:
        self.app.workers.cancel_group(self.app, "experiment")
        self.app.board_command("abort: disarm", lambda link: link.disarm())
        if self.running:
            self._state("aborting: runner cancelled, motor disarmed")

    def on_sequence_progress(self, message: SequenceProgress) -> None:
        p = message.progress
        done = getattr(p, "done", None)
        if done is not None:
            self.query_one("#seq-bar", ProgressBar).update(progress=done)
        text = getattr(p, "text", None)
        if text:
            self._state(text)

    def on_sequence_done(self, message: SequenceDone) -> None:
        self.running = False
        self._state(message.text)
        self.app.note(message.text)
