"""The safety bar and the base screens that put it on every screen and over every dialog.

The bar shows link state, SIMULATED for a simulated board, motor state with the trip cause,
the failing arm conditions in words and the kill keys (README.md, The terminal UI). Its state is
the App's ``safety`` reactive (a :class:`~rigbench.ui.state.SafetyState`), fed by the App's
timer; each bar watches it, so a pushed screen or dialog shows the same thing at once.

Header and Footer belong to each screen in Textual, so every screen derives from
:class:`BenchScreen` (or :class:`BenchModal` for dialogs), which composes the bar and the
footer stacked in one bottom container (two widgets docked at the bottom would overlap).
"""

from __future__ import annotations

from typing import Generic, TypeVar

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.content import Content
from textual.screen import ModalScreen, Screen
from textual.widget import Widget
from textual.widgets import Footer, Static

from rigbench.ui.state import KILL_KEYS_TEXT, SafetyState

MOTOR_STYLE = {
    "off": "bold $success",
    "armed": "bold $warning",
    "running": "bold reverse $warning",
    "tripped": "bold reverse $error",
    "unknown": "bold $text-muted",
}
LINK_STYLE = {"ok": "bold $success", "connecting": "bold $warning"}


def bar_lines(state: SafetyState) -> Content:
    """The bar's two lines as styled text (plain text, no markup parsing). The most urgent
    first, so a narrow terminal cuts the link figures, never the kill key or the motor."""
    sep = ("  │  ", "$text-muted")
    if state.kill_blocked:
        return blocked_lines(state, sep)
    parts: list = []
    if state.alarm:
        parts += [(" ALARM ", "bold reverse $error"), " ", (state.alarm, "bold $error"), sep]
    parts += [("KILL ", "bold $error"), (KILL_KEYS_TEXT, "bold"), sep]
    last_known = " (last known)" if state.alarm and state.motor != "unknown" else ""
    parts += [("MOTOR ", "$text-muted"),
              (state.motor_text + last_known, MOTOR_STYLE.get(state.motor, "bold $error"))]
    if state.mode and state.mode != "off":
        parts += [f"  mode {state.mode}"]
    if state.simulated:
        parts += [sep, ("SIMULATED", "bold reverse $secondary")]
    parts.append(sep)
    if state.alarm:
        parts += [("LINK ", "$text-muted"), state.port]
    else:
        parts += [("LINK ", "$text-muted"),
                  (state.link, LINK_STYLE.get(state.link, "bold $error")), f"  {state.port}"]
        if state.link == "ok":
            parts.append(f"  {state.frames_per_s:.0f} frames/s  {state.errors} errors")
    line1 = Content.assemble(*parts)
    if state.alarm:
        line2 = Content.assemble((state.alarm_detail or state.alarm, "bold $error"))
    elif state.motor == "tripped":
        line2 = Content.assemble(("Tripped", "bold $error"),
                                 f" ({state.fault or 'cause not given'}): clear the fault "
                                 "(c), then arm again deliberately.")
    elif state.why and state.motor == "off":
        line2 = Content.assemble(("Arming blocked: ", "$warning"), "; ".join(state.why))
    elif state.motor == "off":
        line2 = Content.assemble(("Ready to arm", "$success"), " (a): every interlock holds.")
    elif state.motor in ("armed", "running"):
        line2 = Content.assemble(("Motor enabled.", "bold $warning"),
                                 f" Kill: {KILL_KEYS_TEXT}. Disarm: d.")
    else:
        line2 = Content("Motor state not known yet.")
    if state.note:
        line2 = Content.assemble(line2, sep, (state.note, "italic"))
    return Content.assemble(line1, "\n", line2)


KILL_BLOCKED_TEXT = "KILL NOT DELIVERED — USE THE HARDWARE CUT-OFF"


def blocked_lines(state: SafetyState, sep) -> Content:
    """The bar while the link cannot carry a kill: that first, the motor unknown, then how
    the link comes back, the last note and the reason the link went."""
    line1 = Content.assemble((f" {state.alarm} ", "bold reverse $error"), " ",
                             (KILL_BLOCKED_TEXT, "bold $error"), sep,
                             ("MOTOR ", "$text-muted"), ("unknown", "bold $error"), sep,
                             ("LINK ", "$text-muted"), state.port)
    rest = [text for text in (state.relink, state.note, state.alarm_detail) if text]
    line2: list = []
    for i, text in enumerate(rest):
        line2 += ([sep] if i else []) + [(text, "bold $error" if i == 0 else "")]
    return Content.assemble(line1, "\n", *line2)


class SafetyBar(Widget):
    """Two lines of safety state; turns into an alarm when the link is lost or stale.
    Repainted, never re-laid out, when the state changes (it changes ten times a second)."""

    DEFAULT_CSS = """
    SafetyBar {
        height: 2;
        padding: 0 1;
        text-wrap: nowrap;
        text-overflow: ellipsis;
        background: $panel;
        color: $foreground;
    }
    SafetyBar.-alarm { background: $error 30%; }
    SafetyBar.-tripped { background: $error 15%; }
    SafetyBar.-live { background: $warning 15%; }
    """

    def __init__(self) -> None:
        super().__init__()
        self.state: SafetyState | None = None
        self._content = Content("")

    def on_mount(self) -> None:
        self.watch(self.app, "safety", self.show_state, init=True)

    def show_state(self, state: SafetyState) -> None:
        self.state = state
        self.set_class(bool(state.alarm), "-alarm")
        self.set_class(state.motor == "tripped" and not state.alarm, "-tripped")
        self.set_class(state.motor in ("armed", "running") and not state.alarm, "-live")
        self._content = bar_lines(state)
        self.refresh()

    def render(self) -> Content:
        return self._content

    @property
    def text(self) -> str:
        """The bar's plain text (for tests and logs)."""
        return self._content.plain


NAV = (("1", "Live", "live"), ("2", "Experiments", "experiments"), ("3", "Gains", "gains"),
       ("4", "Sequences", "sequences"), ("5", "Link", "link"), ("F1", "Help", "help"))


class TopBar(Static):
    """The app's name and the screens with their keys; the present one highlighted.
    Each name is clickable."""

    DEFAULT_CSS = """
    TopBar { height: 1; background: $panel; color: $text-muted; padding: 0 1; }
    """

    def __init__(self, current: str) -> None:
        super().__init__("", markup=False)
        self.current = current

    def on_mount(self) -> None:
        items = []
        for key, label, mode in NAV:
            style = "bold reverse $primary" if label == self.current else "$foreground"
            items.append(f"[{style} @click=app.switch_mode('{mode}')] {key} {label} [/]")
        self.update(Content.from_markup("[bold $primary]rigbench[/]   " + " ".join(items)))


class BottomStack(Vertical):
    """The safety bar above the footer, docked together at the bottom."""

    DEFAULT_CSS = """
    BottomStack { dock: bottom; height: auto; }
    """


def size_classes(app) -> dict[str, bool]:
    """The App's breakpoint classes (``HORIZONTAL_BREAKPOINTS``, ``VERTICAL_BREAKPOINTS``)
    for the terminal's present size: class name -> whether it applies."""
    out: dict[str, bool] = {}
    for limits, size in ((app.HORIZONTAL_BREAKPOINTS, app.size.width),
                         (app.VERTICAL_BREAKPOINTS, app.size.height)):
        names = [name for _, name in sorted(limits or [])]
        fitting = [name for limit, name in sorted(limits or []) if size >= limit]
        out.update({name: bool(fitting) and name == fitting[-1] for name in names})
    return out


# First in every footer, whatever a screen adds: Textual lists a screen's bindings (its
# base classes' first) before the App's, so the App's priority bindings for these keys,
# which replace them where they stand, would otherwise be cut off on a narrow terminal.
FOOTER_FIRST = [Binding("ctrl+k", "app.kill", "KILL"), Binding("ctrl+q", "app.quit", "Quit")]


class BenchScreen(Screen):
    """A full screen with header, body, safety bar and footer. Subclasses write
    :meth:`compose_body`."""

    BINDINGS = FOOTER_FIRST

    def on_mount(self) -> None:
        # Textual sets the size classes on the first resize, after a first layout without
        # them; a narrow terminal then shows a scrollbar that outlives the overflow
        for name, on in size_classes(self.app).items():
            self.set_class(on, name)

    def compose(self) -> ComposeResult:
        yield TopBar(self.SUB_TITLE or "")
        yield from self.compose_body()
        with BottomStack():
            yield SafetyBar()
            yield Footer()

    def compose_body(self) -> ComposeResult:  # pragma: no cover - overridden
        yield from ()


ResultType = TypeVar("ResultType")


class BenchModal(ModalScreen[ResultType], Generic[ResultType]):
    """A dialog that keeps the safety bar visible beneath it. Subclasses write
    :meth:`compose_dialog`; the kill keys work here as everywhere (App priority bindings)."""

    DEFAULT_CSS = """
    BenchModal { align: center middle; }
    """
    BINDINGS = FOOTER_FIRST

    def on_mount(self) -> None:
        # as BenchScreen: the size classes before the first layout (a short terminal
        # lays the dialog out tighter, rigbench.ui.widgets.dialogs)
        for name, on in size_classes(self.app).items():
            self.set_class(on, name)

    def compose(self) -> ComposeResult:
        yield from self.compose_dialog()
        with BottomStack():
            yield SafetyBar()
            yield Footer()

    def compose_dialog(self) -> ComposeResult:  # pragma: no cover - overridden
        yield from ()
