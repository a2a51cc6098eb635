"""Help: every key of the UI, read from the bindings themselves so the list cannot drift,
and a few lines on the safety bar and the kill.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.widgets import Static

from rigbench.ui.safety import BenchScreen
from rigbench.ui.state import KILL_KEYS_TEXT

ABOUT = f"""\
Kill: {KILL_KEYS_TEXT}, on every screen, in every dialog, while typing in any field. It sends \
the kill bytes to the board at once; the bar then shows the board's answer (motor tripped, \
cause kill). A software kill is not an emergency stop: keep the hardware cut-off within reach.

The bar at the bottom of every screen shows the link (port, frames per second, errors), \
SIMULATED for a simulated board, the motor (off, armed, running, tripped and why), and why \
arming would be refused now. It turns red when the link is lost or telemetry stops.

Every action that can move the motor asks first (arm, hold, relay test, disturbance sweep, sequence; from a key or the palette): Cancel starts nothing. Clearing a fault never starts the motor: it leaves it off.

A lost link cannot carry a kill: the bar says KILL NOT DELIVERED and the motor state is unknown; arming and tests are refused. A board on a device path that comes back (plugged in again, restarted) is reopened by itself, ctrl+r tries at once; the bar says what changed (restart, latched fault, gains), and nothing is ever re-armed.

ctrl+q quits: it disarms the motor and stops the telemetry stream first, and asks while the motor is armed or running.
ctrl+p opens the command palette: every action below can be found there by name.
"""


def key_text(binding: Binding) -> str:
    keys = [k.strip() for k in binding.key.split(",")]
    names = {"question_mark": "?", "space": "space", "escape": "esc", "enter": "enter"}
    return " / ".join(names.get(k, k) for k in keys)


def binding_rows(bindings) -> list[tuple[str, str]]:
    """(keys, what) for each binding with a description; same action merged."""
    rows: dict[str, list] = {}
    for b in bindings:
        if not isinstance(b, Binding):
            b = Binding(*b)
        what = b.description or b.action
        rows.setdefault(what, []).append(key_text(b))
    return [(" / ".join(keys), what) for what, keys in rows.items()]


class HelpScreen(BenchScreen):
    """Keys of the App and of each screen."""

    SUB_TITLE = "Help and keys"

    def compose_body(self) -> ComposeResult:
        with VerticalScroll(id="help-body"):
            yield Static(ABOUT, id="help-about", markup=False)
            yield Static("", id="help-keys", markup=False)

    def on_mount(self) -> None:
        lines = ["Everywhere"]
        lines += [f"  {keys:<22} {what}" for keys, what in binding_rows(self.app.BINDINGS)]
        lines += ["  ctrl+p                 command palette"]
        for mode, screen_cls in self.app.MODES.items():
            rows = binding_rows(getattr(screen_cls, "BINDINGS", []))
            if rows and screen_cls is not type(self):
                lines += ["", f"{screen_cls.SUB_TITLE} ({mode})"]
                lines += [f"  {keys:<22} {what}" for keys, what in rows]
        self.query_one("#help-keys", Static).update("\n".join(lines))
