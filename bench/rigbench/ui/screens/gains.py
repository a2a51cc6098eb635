"""Gains screen: the board's gains and limits with their ranges, proposals from the last
relay test with predicted margins, editing with range checks; push, store, save and load
are in :mod:`rigbench.ui.screens.gains_actions`.

Values are in the board's declared units throughout.
"""

from __future__ import annotations

from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.widgets import DataTable, Label, Select, Static

from rigbench.experiments.conventions import primary_loop

from rigbench.ui.widgets.dialogs import PromptDialog
from rigbench.ui.screens.gains_actions import GainsBoardActions
from rigbench.ui.results import proposal_items, proposal_rows
from rigbench.ui.safety import BenchScreen
from rigbench.ui.view import format_value

LIMIT_PREFIXES = ("trip_", "arm_")


def fmt(v) -> str:
    return "–" if v is None else f"{v:.6g}"


class GainsScreen(GainsBoardActions, BenchScreen):
    SUB_TITLE = "Gains"
    BINDINGS = [
        Binding("e", "edit", "Edit value"),
        Binding("p", "push", "Push…"),
        Binding("g", "reload", "Read back"),
        Binding("ctrl+s", "save_profile", "Save profile…"),
        Binding("l", "load_profile", "Load profile…"),
        Binding("ctrl+w", "store", "Store on board…"),
        Binding("u", "undo", "Drop edits"),
    ]

    def __init__(self, *, profile_dir: str | Path = "profiles") -> None:
        super().__init__()
        self.profile_dir = Path(profile_dir)
        self.loop: str | None = None
        self.pending: dict[str, float] = {}
        self.loaded = None  # a profile loaded from a file, pushed as it is
        self.origin = ""  # where the pending values came from, in words
        self.origin_proposal = None  # the proposal they came from, if any
        self._proposals: list = []

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="gains-top"):
            yield Label("Loop", classes="section")
            yield Select([], prompt="loop", allow_blank=True, compact=True, id="gains-loop")
            yield Static("", id="gains-origin", markup=False)
        yield DataTable(id="gains-table", cursor_type="row", zebra_stripes=True)
        yield Label("Proposals from the last relay test, ranked (enter takes one)",
                    classes="section")
        yield DataTable(id="proposals", cursor_type="row")
        yield Static("", id="gains-note", markup=False)

    def on_mount(self) -> None:
        self.query_one("#gains-table", DataTable).add_columns(
            "parameter", "unit", "range", "board", "new", "change")
        self.watch(self.app, "link_serial", lambda _: self.setup(), init=False)
        self.setup()

    def on_screen_resume(self) -> None:
        outcome = self.app.last_relay
        if outcome is not None and not self.pending and outcome.loop_name != self.loop \
                and self.app.link is not None and outcome.loop_name in self.app.link.loops:
            self.loop = outcome.loop_name  # show the loop just tested
            pick = self.query_one("#gains-loop", Select)
            with pick.prevent(Select.Changed):
                pick.value = self.loop
        self.show_table()
        self.show_proposals()

    def say(self, text: str) -> None:
        self.query_one("#gains-note", Static).update(text)

    def _drop(self) -> None:
        self.pending, self.loaded, self.origin, self.origin_proposal = {}, None, "", None

    # ------------------------------------------------------------------ contents

    def setup(self) -> None:
        link = self.app.link
        if link is None:
            self.say("No link open: connect on the Link screen (5).")
            return
        pick = self.query_one("#gains-loop", Select)
        pick.set_options([(name, name) for name in link.loops])
        first = primary_loop(link.loops, {s.name: s.unit for s in link.signals}).name
        if first is not None:
            self.loop = first
            with pick.prevent(Select.Changed):
                pick.value = self.loop
        self._drop()
        self.show_table()
        self.show_proposals()

    def on_select_changed(self, event: Select.Changed) -> None:
        if event.select.id == "gains-loop" and event.value is not Select.BLANK:
            if str(event.value) != self.loop:
                self.loop = str(event.value)
                self._drop()
            self.show_table()
            self.show_proposals()

    def names(self) -> list[str]:
        """The loop's gains, then the board's writable trip and arm limits."""
        link = self.app.link
        if link is None or self.loop not in link.loops:
            return []
        gains = list(link.loops[self.loop].gains)
        limits = [n for n, p in link.params.items()
                  if p.writable and n.startswith(LIMIT_PREFIXES) and n not in gains]
        return gains + limits + [n for n in self.pending if n not in gains + limits]

    def show_table(self) -> None:
        link = self.app.link
        table = self.query_one("#gains-table", DataTable)
        row = table.cursor_row
        table.clear()
        if link is None:
            return
        for name in self.names():
            p = link.params[name]
            new = self.pending.get(name)
            change = ""
            if new is not None:
                change = f"{100 * (new - p.value) / abs(p.value):+.3g} %" if p.value else "new"
            table.add_row(name, p.unit, f"{fmt(p.minimum)} .. {fmt(p.maximum)}",
                          fmt(p.value), fmt(new) if new is not None else "", change, key=name)
        if row is not None and table.row_count:
            table.move_cursor(row=min(row, table.row_count - 1))
        self.query_one("#gains-origin", Static).update(
            f"pending: {self.origin} (p pushes, u drops)" if self.pending
            else "no pending changes")

    def show_proposals(self) -> None:
        outcome = self.app.last_relay
        table = self.query_one("#proposals", DataTable)
        table.clear(columns=True)
        table.add_columns("rank", "rule", "form", "kp", "ki", "kd", "predicted margins",
                          "IAE", "note")
        self._proposals = []
        if outcome is None or outcome.proposals is None or outcome.loop_name != self.loop:
            why = outcome.proposal_error if outcome is not None and outcome.loop_name == \
                self.loop and outcome.proposal_error else \
                "none yet: run a relay test on this loop (Experiments screen, 2)"
            table.add_row("", "", "", "", "", "", "", "", why)
            return
        self._proposals = proposal_items(outcome.proposals)
        for row in proposal_rows(outcome.proposals):
            table.add_row(*row)

    # ------------------------------------------------------------------ editing

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        if event.data_table.id == "proposals":
            self.take_proposal(event.cursor_row)
        else:
            self.action_edit()

    def take_proposal(self, index: int) -> None:
        link = self.app.link
        if link is None or index >= len(self._proposals):
            return
        prop = self._proposals[index]
        if not prop.applies or not prop.gains:
            self.say(f"{prop.rule} does not apply: {prop.reason}")
            return
        self._drop()
        self.pending = {n: float(v) for n, v in prop.gains.items()}
        self.origin, self.origin_proposal = f"proposal {prop.rule}", prop
        bad = [n for n, v in self.pending.items()
               if n not in link.params or not link.params[n].admits(v)]
        self.say(f"{', '.join(bad)} outside the board's range: it would refuse the push"
                 if bad else "Proposal staged: p pushes it (the difference is shown first).")
        self.show_table()

    def action_edit(self) -> None:
        link = self.app.link
        table = self.query_one("#gains-table", DataTable)
        if link is None or not table.row_count:
            return
        name = str(table.coordinate_to_cell_key((table.cursor_row, 0)).row_key.value)
        p = link.params[name]

        def done(text: str | None) -> None:
            if text is None:
                return
            try:
                value = float(text)
            except ValueError:
                self.say(f"{text!r} is not a number; {name} unchanged")
                return
            if not p.admits(value):
                self.say(f"{fmt(value)} is outside {name}'s range {fmt(p.minimum)} .. "
                         f"{fmt(p.maximum)} {p.unit}; unchanged")
                return
            self.pending[name] = value
            self.loaded, self.origin, self.origin_proposal = None, "edited by hand", None
            self.show_table()

        self.app.push_screen(PromptDialog(
            f"New value for {name}", f"Range {fmt(p.minimum)} .. {fmt(p.maximum)} {p.unit}; "
            f"the board has {fmt(p.value)}.",
            value=format_value(self.pending.get(name, p.value)).strip()), done)

    def action_undo(self) -> None:
        self._drop()
        self.show_table()

    def action_reload(self) -> None:
        self.app.board_command("read gains back",
                               lambda link: f"{len(link.refresh_params())} parameters read",
                               on_done=lambda _: self.show_table())
