"""Gains screen: the board's gains and limits with their ranges, proposals from the last
experiment with predicted margins, editing with range checks, push (difference shown first,
then one atomic ``set`` and a read-back), save as a profile, load a profile, store on board.

Values are in the board's declared units throughout. Profile reading, checking and writing
are bench.profiles; the board calls go through the link in thread workers.

Must not import: bench.rig, serial, bench.ui.app.
"""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import DataTable, Label, Select, Static

from bench import profiles

from .dialogs import ConfirmDialog, PromptDialog
from .safety import BenchScreen
from .view import format_value

LIMIT_PREFIXES = ("trip_", "arm_")


def fmt(v) -> str:
    return "–" if v is None else f"{v:.6g}"


def margin_text(m) -> str:
    if m is None:
        return "no model: margins not predicted"
    if not m.stable:
        return "UNSTABLE on the model"
    gm = f"GM {m.gain_margin_upper_db:.1f} dB" if m.gain_margin_upper_db is not None else "GM ∞"
    if m.gain_margin_lower_db is not None:
        gm += f" / {m.gain_margin_lower_db:.1f} dB"
    pm = f"PM {m.phase_margin_deg:.0f}°" if m.phase_margin_deg is not None else "PM –"
    return f"{gm}  {pm}  Ms {m.ms:.2f}"


def predicted(m) -> dict[str, float]:
    """Predicted margins in the profile's provenance keys (bench.profiles.PREDICTED_KEYS)."""
    if m is None:
        return {}
    pairs = {"gain_margin_db": m.gain_margin_upper_db,
             "gain_margin_lower_db": m.gain_margin_lower_db,
             "phase_margin_deg": m.phase_margin_deg, "delay_margin_s": m.delay_margin_s,
             "ms": m.ms, "crossover_rad_s": m.crossover_rad_s}
    return {k: float(v) for k, v in pairs.items() if v is not None}


class GainsScreen(BenchScreen):
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
        self.origin = ""  # where the pending values came from, in words
        self.origin_proposal = None  # the proposal pending values came from, if any
        self._proposals: list = []
        self._link_id = None

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="gains-top"):
            yield Label("Loop", classes="section")
            yield Select([], prompt="loop", allow_blank=True, compact=True,
                         id="gains-loop")
            yield Static("", id="gains-origin", markup=False)
        yield DataTable(id="gains-table", cursor_type="row", zebra_stripes=True)
        yield Label("Proposals from the last experiment (enter takes one)", classes="section")
        yield DataTable(id="proposals", cursor_type="row")
        yield Static("", id="gains-note", markup=False)

    def on_mount(self) -> None:
        table = self.query_one("#gains-table", DataTable)
        table.add_columns("parameter", "unit", "range", "board", "new", "change")
        props = self.query_one("#proposals", DataTable)
        props.add_columns("rule", "form", "kp", "ki", "kd", "predicted margins", "note")
        self.watch(self.app, "link_serial", lambda _: self.setup(), init=False)
        self.setup()

    def on_screen_resume(self) -> None:
        self.show_proposals()
        self.show_table()

    # ------------------------------------------------------------------ contents

    def setup(self) -> None:
        link = self.app.link
        if link is None:
            self.query_one("#gains-note", Static).update("No link open: connect on the Link "
                                                         "screen (5).")
            return
        pick = self.query_one("#gains-loop", Select)
        pick.set_options([(name, name) for name in link.loops])
        if link.loops:
            self.loop = next(iter(link.loops))
            with pick.prevent(Select.Changed):
                pick.value = self.loop
        self.pending, self.origin, self.origin_proposal = {}, "", None
        self.show_table()
        self.show_proposals()

    def on_select_changed(self, event: Select.Changed) -> None:
        if event.select.id == "gains-loop" and event.value is not Select.BLANK:
            self.loop = str(event.value)
            self.pending, self.origin, self.origin_proposal = {}, "", None
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
        return gains + limits

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
                change = (f"{100 * (new - p.value) / abs(p.value):+.3g} %" if p.value
                          else "new")
            table.add_row(name, p.unit, f"{fmt(p.minimum)} .. {fmt(p.maximum)}",
                          fmt(p.value), fmt(new) if new is not None else "", change, key=name)
        if row is not None and table.row_count:
            table.move_cursor(row=min(row, table.row_count - 1))
        self.query_one("#gains-origin", Static).update(
            f"pending: {self.origin}" if self.pending else "no pending changes")

    def show_proposals(self) -> None:
        result = self.app.last_result
        props = self.query_one("#proposals", DataTable)
        props.clear()
        self._proposals = []
        loop = getattr(result, "loop", None)
        if result is None or (loop is not None and loop != self.loop):
            props.add_row("(none yet: run a relay test on the Experiments screen, 2)",
                          "", "", "", "", "", "")
            return
        for prop in getattr(result, "proposals", None) or []:
            self._proposals.append(prop)
            if prop.applies:
                props.add_row(prop.rule, prop.kind, fmt(prop.kp), fmt(prop.ki), fmt(prop.kd),
                              margin_text(prop.margins), prop.notes[:40])
            else:
                props.add_row(prop.rule, prop.kind, "", "", "", "", prop.reason[:60])

    # ------------------------------------------------------------------ editing

    def _note(self, text: str) -> None:
        self.query_one("#gains-note", Static).update(text)

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        if event.data_table.id == "proposals":
            self.take_proposal(event.cursor_row)
        else:
            self.action_edit()

    def take_proposal(self, index: int) -> None:
        link = self.app.link
        if link is None or index >= len(self._proposals) or self.loop not in link.loops:
            return
        prop = self._proposals[index]
        if not prop.applies:
            self._note(f"{prop.rule} does not apply: {prop.reason}")
            return
        kp_name, ki_name, kd_name = link.loops[self.loop].gains
        self.pending = {kp_name: prop.kp, ki_name: prop.ki, kd_name: prop.kd}
        self.origin, self.origin_proposal = f"proposal {prop.rule}", prop
        bad = [n for n, v in self.pending.items() if not link.params[n].admits(v)]
        self._note(f"{', '.join(bad)} outside the board's range: the board would refuse "
                   "the push" if bad else "Proposal staged: push it with p.")
        self.show_table()

    def action_edit(self) -> None:
        link = self.app.link
        table = self.query_one("#gains-table", DataTable)
        if link is None or not table.row_count:
            return
        name = str(table.coordinate_to_cell_key((table.cursor_row, 0)).row_key.value)
        p = link.params[name]
        current = self.pending.get(name, p.value)

        def done(text: str | None) -> None:
            if text is None:
                return
            try:
                value = float(text)
            except ValueError:
                self._note(f"{text!r} is not a number; {name} unchanged")
                return
            if not p.admits(value):
                self._note(f"{fmt(value)} is outside {name}'s range {fmt(p.minimum)} .. "
                           f"{fmt(p.maximum)} {p.unit}; unchanged")
                return
            self.pending[name] = value
            self.origin, self.origin_proposal = "edited by hand", None
            self.show_table()

        self.app.push_screen(PromptDialog(
            f"New value for {name}", f"Range {fmt(p.minimum)} .. {fmt(p.maximum)} {p.unit}; "
            f"the board has {fmt(p.value)}.", value=format_value(current).strip()), done)

    def action_undo(self) -> None:
        self.pending, self.origin, self.origin_proposal = {}, "", None
        self.show_table()

    # ------------------------------------------------------------------ board

    def action_reload(self) -> None:
        self.app.board_command("read gains back", lambda link: len(link.refresh_params()),
                               on_done=lambda _: self.show_table())

    def action_push(self) -> None:
        link = self.app.link
        if link is None or not self.pending:
            self._note("Nothing to push: edit a value (e) or take a proposal first.")
            return
        lines = []
        for name, new in self.pending.items():
            p = link.params[name]
            lines.append(f"{name:<14} {fmt(p.value):>12} -> {fmt(new):<12} {p.unit}")
        body = ("The board now has -> will get (one atomic set; read back after):\n\n"
                + "\n".join(lines) + f"\n\nFrom: {self.origin}.")
        values = dict(self.pending)

        def push(link):
            applied = link.set(**values)
            back = profiles.read_values(link, list(values))
            wrong = [n for n in values if not profiles.same_value(back[n], applied[n])]
            return (f"{len(applied)} values applied; read back "
                    + ("matches" if not wrong else f"DIFFERS for {', '.join(wrong)}"))

        def after(msg) -> None:
            if msg.ok:
                self.pending = {}
            self._note(msg.text if not msg.ok else str(msg.result))
            self.show_table()

        def confirmed(yes: bool | None) -> None:
            if yes:
                self.app.board_command("push gains", push, on_done=after)

        self.app.push_screen(ConfirmDialog("Push these gains?", body, "Push to the board",
                                           danger=True), confirmed)

    def action_store(self) -> None:
        def confirmed(yes: bool | None) -> None:
            if yes:
                self.app.board_command(
                    "store on board",
                    lambda link: f"stored {link.save().count} parameters, CRC checked")

        self.app.push_screen(ConfirmDialog(
            "Store the parameters in the board's memory?",
            "The board will boot with its present values, every writable parameter.",
            "Store on the board", danger=False), confirmed)

    def action_save_profile(self) -> None:
        link = self.app.link
        if link is None or self.loop is None:
            return
        prop = self.origin_proposal if not self.pending else None
        default = re.sub(r"[^a-z0-9_-]+", "-", f"{link.info.rig}-{self.loop}").strip("-")

        def save(name: str | None) -> None:
            if not name:
                return
            path = Path(name if name.endswith(".yaml") else f"{name}.yaml")
            if not path.is_absolute() and path.parent == Path("."):
                path = self.profile_dir / path

            def work(link):
                prof = profiles.profile_from_board(link, self.loop, name=path.stem)
                if prop is not None and all(
                        profiles.same_value(prof.gains[n].value, v, digits=6)
                        for n, v in zip(link.loops[self.loop].gains,
                                        (prop.kp, prop.ki, prop.kd))):
                    prof = replace(prof, provenance=replace(
                        prof.provenance, source="rule", method=prop.rule,
                        predicted=predicted(prop.margins)))
                return str(profiles.save_profile(prof, path))

            self.app.board_command("save profile", work,
                                   on_done=lambda m: self._note(
                                       f"saved {m.result}" if m.ok else m.text))

        self.app.push_screen(PromptDialog(
            "Save the board's gains as a profile",
            f"The values the board has now for loop {self.loop} (read again before "
            f"writing). File name (in {self.profile_dir}/):", value=default), save)

    def action_load_profile(self) -> None:
        def load(name: str | None) -> None:
            if not name:
                return
            path = Path(name)
            if not path.exists() and (self.profile_dir / path).exists():
                path = self.profile_dir / path
            link = self.app.link
            try:
                prof = profiles.load_profile(path)
            except Exception as exc:  # noqa: BLE001 - SchemaError, OSError: in words
                self._note(f"cannot load {path}: {exc}")
                return
            problems = profiles.check_against_board(prof, link.params, link.loops,
                                                    info=link.info) if link else []
            errors = [p for p in problems if p.severity == "error"]
            if errors:
                self._note("not loaded: " + "; ".join(p.format(str(path)) for p in errors))
                return
            if prof.loop in (link.loops if link else {}):
                self.loop = prof.loop
            self.pending = prof.values()
            self.origin, self.origin_proposal = f"profile {path}", None
            warn = "; ".join(p.format() for p in problems)
            self._note(f"profile staged: push it with p. {warn}".strip())
            self.show_table()

        self.app.push_screen(PromptDialog("Load a profile", "Path of a profile file "
                                          f"(or a name in {self.profile_dir}/):"), load)
