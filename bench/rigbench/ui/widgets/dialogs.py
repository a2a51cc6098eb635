"""Dialogs: a deliberate confirmation and a text prompt, both over the safety bar.

A confirmation starts with the focus on Cancel, so a stray Enter never arms a motor or
pushes gains; the confirming button must be chosen on purpose (Tab, then Enter, or a click).
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Button, Input, Label, Static

from rigbench.ui.safety import BenchModal


class Dialog(Vertical):
    """The box a dialog's content sits in."""

    DEFAULT_CSS = """
    Dialog {
        width: 76; max-width: 95%; height: auto; max-height: 80%;
        padding: 1 2; border: thick $primary; background: $surface;
    }
    Dialog.-danger { border: thick $warning; }
    Dialog > .dialog-title { text-style: bold; margin-bottom: 1; }
    Dialog > .dialog-body { margin-bottom: 1; }
    Dialog > Horizontal { height: auto; align-horizontal: right; }
    Dialog Button { margin-left: 2; }
    """


class ConfirmDialog(BenchModal[bool]):
    """Ask before doing something with consequences; dismisses with True or False."""

    BINDINGS = [Binding("escape", "cancel", "Cancel")]
    AUTO_FOCUS = "#cancel"  # Textual focuses it whenever the dialog comes to the front

    def __init__(self, title: str, body: str, confirm: str, *, danger: bool = True) -> None:
        super().__init__()
        self.title_text, self.body_text, self.confirm_text = title, body, confirm
        self.danger = danger

    def compose_dialog(self) -> ComposeResult:
        with Dialog(classes="-danger" if self.danger else ""):
            yield Label(self.title_text, classes="dialog-title", markup=False)
            yield Static(self.body_text, classes="dialog-body", markup=False)
            with Horizontal():
                yield Button("Cancel", id="cancel")
                yield Button(self.confirm_text, id="confirm",
                             variant="warning" if self.danger else "primary")

    def on_mount(self) -> None:
        # a dialog dismissed before its mount was handled (a busy app) has no buttons left
        for button in self.query("#cancel").results(Button):
            button.focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        event.stop()
        self.dismiss(event.button.id == "confirm")

    def action_cancel(self) -> None:
        self.dismiss(False)


class PromptDialog(BenchModal[str | None]):
    """Ask for one line of text (a file name, a value); dismisses with it or None."""

    BINDINGS = [Binding("escape", "cancel", "Cancel")]

    def __init__(self, title: str, body: str, value: str = "", placeholder: str = "") -> None:
        super().__init__()
        self.title_text, self.body_text = title, body
        self.value, self.placeholder = value, placeholder

    def compose_dialog(self) -> ComposeResult:
        with Dialog(classes=""):
            yield Label(self.title_text, classes="dialog-title", markup=False)
            yield Static(self.body_text, classes="dialog-body", markup=False)
            yield Input(self.value, placeholder=self.placeholder, id="answer")
            with Horizontal():
                yield Button("Cancel", id="cancel")
                yield Button("OK", id="ok", variant="primary")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.dismiss(event.value.strip() or None)

    def on_button_pressed(self, event: Button.Pressed) -> None:
        event.stop()
        self.dismiss(self.query_one(Input).value.strip() or None if event.button.id == "ok"
                     else None)

    def action_cancel(self) -> None:
        self.dismiss(None)
