"""What the Gains screen does with the board and with files: push (difference shown first,
then one atomic ``set`` and a read-back, by rigbench.profiles.push), store on the board, save
the board's gains as a profile, load a profile (rigbench.profiles.model).

A mixin of :class:`rigbench.ui.screens.gains.GainsScreen`; every board call runs in a worker through
``App.board_command`` and reports back in words.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import replace
from pathlib import Path

from rigbench.profiles import diff as profile_diff
from rigbench.profiles import model as profiles
from rigbench.profiles import push as profile_push

from rigbench.ui.widgets.dialogs import ConfirmDialog, PromptDialog


def predicted(m) -> dict[str, float]:
    """Predicted margins in a profile's provenance keys (rigbench.profiles.model.PREDICTED_KEYS)."""
    if m is None:
        return {}
    pairs = {"gain_margin_db": m.gain_margin_upper_db,
             "gain_margin_lower_db": m.gain_margin_lower_db,
             "phase_margin_deg": m.phase_margin_deg, "delay_margin_s": m.delay_margin_s,
             "ms": m.ms, "crossover_rad_s": m.crossover_rad_s}
    return {k: float(v) for k, v in pairs.items() if v is not None}


def staged_profile(link, loop: str, pending: dict, proposal=None, loaded=None):
    """The profile a push sends: a loaded profile as it is, else the board's gains and
    limits of ``loop`` with the pending values in place (read from the board now)."""
    if loaded is not None:
        return loaded
    # a proposal may set another loop's gains too (the balance trim): carry them as gains
    gains = link.loops[loop].gains
    extra = [n for n in pending if n not in gains and not n.startswith(("trip_", "arm_"))]
    board = profiles.profile_from_board(link, loop, name=f"{loop} gains", extra=extra)
    values = {**board.values(), **pending}
    prof = profile_push.board_values_profile(board, values)
    if proposal is not None:
        prov = profiles.Provenance(source="rule", date=dt.date.today().isoformat(),
                                   method=proposal.rule, predicted=predicted(proposal.margins))
    else:
        prov = profiles.Provenance(source="manual", date=dt.date.today().isoformat())
    return replace(prof, provenance=prov)


class GainsBoardActions:
    """Push, store, save and load for the Gains screen (mixed into GainsScreen)."""

    def action_push(self) -> None:
        if self.app.link is None or not self.pending or self.loop is None:
            self.say("Nothing to push: edit a value (e), take a proposal or load a profile.")
            return
        args = (self.loop, dict(self.pending), self.origin_proposal, self.loaded)

        def dry(link):
            prof = staged_profile(link, *args)
            return prof, profile_push.push_profile(link, prof, dry_run=True)

        self.app.board_command("check push", dry, on_done=self._confirm_push)

    def _confirm_push(self, msg) -> None:
        if not msg.ok:
            self.say(f"not pushed: {msg.text}")
            return
        prof, report = msg.result
        table = profile_diff.format_diff(report.rows, a_label="board now", b_label="push",
                                     changes_only=True)
        warn = "".join(f"\nwarning: {w.format()}" for w in report.warnings)
        body = (f"{table}\n\nOne atomic set, then a read-back. From: {self.origin}.{warn}")

        def confirmed(yes: bool | None) -> None:
            if yes:
                self.app.board_command("push gains",
                                       lambda link: profile_push.push_profile(link, prof),
                                       on_done=self._pushed)
            else:
                self.say("push cancelled; nothing sent")

        self.app.push_screen(ConfirmDialog("Push these values to the board?", body,
                                           "Push to the board"), confirmed)

    def _pushed(self, msg) -> None:
        if msg.ok:
            report = msg.result
            if report.ok:
                self.say(f"pushed {len(report.applied)} values; read back matches")
                self.pending, self.loaded = {}, None
            else:
                why = report.reset or f"read back differs for {', '.join(report.mismatches)}"
                self.say(f"PUSH NOT CONFIRMED: {why}")
        else:
            self.say(f"not pushed: {msg.text}")
        self.app.board_command("read gains back",
                               lambda link: f"{len(link.refresh_params())} parameters read",
                               on_done=lambda _: self.show_table())

    def action_store(self) -> None:
        def store(link):
            r = link.save()
            return f"stored {r.count} parameters on the board, CRC checked"

        def confirmed(yes: bool | None) -> None:
            if yes:
                self.app.board_command("store on board", store,
                                       on_done=lambda m: self.say(m.result if m.ok else m.text))

        self.app.push_screen(ConfirmDialog(
            "Store the parameters in the board's memory?",
            "Every writable parameter is stored; the board boots with these values.",
            "Store on the board", danger=False), confirmed)

    def action_save_profile(self) -> None:
        link = self.app.link
        if link is None or self.loop is None:
            return
        prop = self.origin_proposal if not self.pending else None
        default = re.sub(r"[^a-z0-9_-]+", "-", f"{link.info.rig}-{self.loop}").strip("-")
        loop = self.loop

        def save(name: str | None) -> None:
            if not name:
                return
            path = Path(name if name.endswith((".yaml", ".yml")) else f"{name}.yaml")
            if not path.is_absolute() and path.parent == Path("."):
                path = self.profile_dir / path

            def work(link):
                prof = profiles.profile_from_board(link, loop, name=path.stem)
                if prop is not None and all(
                        profile_diff.same_value(prof.gains[n].value, v, digits=6)
                        for n, v in prop.gains.items() if n in prof.gains):
                    prof = replace(prof, provenance=replace(
                        prof.provenance, source="rule", method=prop.rule,
                        predicted=predicted(prop.margins)))
                return str(profiles.save_profile(prof, path))

            self.app.board_command("save profile", work, on_done=lambda m: self.say(
                f"saved {m.result}" if m.ok else f"not saved: {m.text}"))

        self.app.push_screen(PromptDialog(
            "Save the board's gains as a profile",
            f"The values the board has now for loop {loop}, read again before writing. "
            f"File name (in {self.profile_dir}/):", value=default), save)

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
                self.say(f"cannot load {path}: {exc}")
                return
            problems = (profiles.check_against_board(prof, link.params, link.loops,
                                                     info=link.info) if link else [])
            errors = [p for p in problems if p.severity == "error"]
            if errors:
                self.say("not loaded: " + "; ".join(p.format(str(path)) for p in errors))
                return
            self.loop = prof.loop
            self.pending, self.loaded = prof.values(), prof
            self.origin, self.origin_proposal = f"profile {path}", None
            warn = " ".join(p.format() for p in problems)
            self.say(f"profile staged: push it with p. {warn}".strip())
            self.show_table()

        files = sorted(self.profile_dir.glob("*.yaml"))
        hint = ", ".join(f.name for f in files[:6]) or "none found"
        self.app.push_screen(PromptDialog(
            "Load a profile", f"Path of a profile file, or a name in {self.profile_dir}/ "
            f"({hint}):"), load)
