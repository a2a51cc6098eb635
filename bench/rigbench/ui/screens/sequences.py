"""Sequences screen: pick a sequence file, validate it (every step listed in run order,
checked against the board), run it with step progress, abort (motor off).

Reading and checking are rigbench.sequences.file and rigbench.sequences.check; running is
rigbench.sequences.run through :mod:`rigbench.ui.runners` (the runner ends with the motor off,
and writes the results folder). Abort sets the runner's cancel flag and sends ``disarm``.
"""

from __future__ import annotations

from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.widgets import DataTable, Input, Label, OptionList, ProgressBar, Static
from textual.widgets.option_list import Option

from rigbench.sequences import check as sequence_check
from rigbench.sequences import file as sequence_file
from rigbench.sequences import steps as sequence_steps

from rigbench.ui import guard, runners
from rigbench.ui.safety import BenchScreen


class SequenceProgress(Message):
    def __init__(self, progress) -> None:
        super().__init__()
        self.progress = progress


class SequenceDone(Message):
    def __init__(self, result, text: str) -> None:
        super().__init__()
        self.result, self.text = result, text


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
        table = self.query_one("#seq-steps", DataTable)
        for label in ("line", "step", "state"):
            table.add_column(label, key=label)
        self.action_rescan()

    def action_rescan(self) -> None:
        files = sorted(self.folder.glob("*.yaml")) + sorted(self.folder.glob("*.yml"))
        ol = self.query_one("#seq-list", OptionList)
        ol.clear_options()
        for f in files:
            ol.add_option(Option(f.name, id=str(f)))
        if not files:
            ol.add_option(Option(f"(no .yaml files in {self.folder}/: rigbench examples DIR "
                                 "copies the demo sequences)", disabled=True))

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
        link = self.app.link
        try:
            seq = sequence_file.load_sequence(path)
            steps = sequence_file.expand(seq)
            problems = sequence_check.check_sequence_against_board(
                seq, link.params, link.loops, link.signals, info=link.info) if link else []
        except Exception as exc:  # noqa: BLE001 - SchemaError names file, line and step
            self.query_one("#seq-summary", Static).update(f"NOT VALID\n{exc}")
            self._state("")
            return False
        errors = [p.format(str(path)) for p in problems if p.severity == "error"]
        warnings = [p.format(str(path)) for p in problems if p.severity != "error"]
        self.sequence, self.steps = seq, steps
        for i, st in enumerate(steps):  # expanded repeats reuse indices: key by position
            text = sequence_steps.describe_step(st, project=seq.project)
            table.add_row(str(st.line), text[:96], "", key=str(i))
        verdict = "NOT RUNNABLE on this board" if errors else "valid"
        notes = "".join(f"\n{e}" for e in errors + warnings)
        self.query_one("#seq-summary", Static).update(
            f"{seq.name}: {verdict}, {len(steps)} steps in run order; on abort: "
            f"{seq.on_abort}{notes}" + (f"\n{seq.notes.strip()}" if seq.notes else ""))
        self.query_one("#seq-bar", ProgressBar).update(total=len(steps), progress=0)
        self._state("ready to run (r)" if not errors else "fix the file first")
        return not errors

    def action_run(self) -> None:
        if self.running:
            self._state("already running (x aborts)")
            return
        if not self.action_validate():
            return
        link = self.app.need_link("run sequence")
        if link is None:
            return
        if runners.find("sequence") is None:
            self._state(runners.missing_text("sequence"))
            return
        seq = self.sequence
        what = (f"The sequence {seq.name!r} runs {len(self.steps)} steps on this board; "
                "steps that arm, hold or run a test move the motor. It ends with the motor "
                f"off; on abort (x): {seq.on_abort}.")
        guard.ask_motor_start(self.app, "Run the sequence?", what, "Run the sequence",
                              lambda: self._launch(link, seq),
                              cancelled="sequence not started: nothing was armed")

    def _launch(self, link, seq) -> None:
        if self.running or self.app.link is not link or self.sequence is not seq:
            self._state("not started: " + ("already running" if self.running
                                           else "the link or the file changed"))
            return
        self.running = True
        self._state(f"running {self.sequence.name}…")
        runners.start(self.app, "sequence", link, {"sequence": self.sequence},
                      on_progress=lambda p: self.post_message(SequenceProgress(p)),
                      on_done=lambda r, t: self.post_message(SequenceDone(r, t)))

    def action_abort(self) -> None:
        """Stop now, motor off: a running sequence ends by its own ``on_abort`` (kill or
        disarm) and the runner checks the motor is off; with nothing running, disarm."""
        if self.running:
            self.app.cancel_experiments()
            self._state("aborting: the runner stops and turns the motor off…")
        else:
            self.app.board_command("abort: disarm", lambda link: link.disarm())

    def on_sequence_progress(self, message: SequenceProgress) -> None:
        p = message.progress
        self.query_one("#seq-bar", ProgressBar).update(total=p.total, progress=p.done)
        table = self.query_one("#seq-steps", DataTable)
        position = p.done - 1 if p.state in ("ok", "passed", "failed") else p.done
        if 0 <= position < table.row_count and p.state != "end":
            table.update_cell(str(position), "state", p.state)
            table.move_cursor(row=position)
        self._state(f"step {p.index} {p.kind}: {p.state}  {p.text}"[:160])

    def on_sequence_done(self, message: SequenceDone) -> None:
        self.running = False
        r = message.result
        if r is None:
            self._state(message.text)
            self.app.note(message.text)
            return
        verdict = "PASSED" if r.ok else f"NOT PASSED ({r.stopped_by}"
        verdict += "" if r.ok else (f": {r.detail})" if r.detail else ")")
        text = (f"{r.name}: {verdict}; {len(r.checks)} checks, {r.checks_failed} failed; "
                f"motor after: {r.motor_after}; results in {r.results_dir}")
        self._state(text)
        self.app.note(text)
        if r.motor_after not in ("off", "tripped"):  # the runner could not make sure
            self.app.board_command("disarm after the sequence", lambda link: link.disarm())
