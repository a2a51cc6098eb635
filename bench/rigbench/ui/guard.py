"""Asking before the motor moves, and refusing to ask when asking is pointless.

Every action of the UI that can make the motor turn (arm, hold, a relay test, a
disturbance sweep, a sequence) goes through :func:`ask_motor_start`: one confirmation with
the same parts everywhere (what will happen, why the board would refuse now, and that a
software kill is not an emergency stop), its focus on Cancel. Cancel starts nothing, so a
motor that was off stays off. While the link is lost, closed, stale or being set up, the
question is not asked at all: the action is refused with the reason, because an answer
from a board we cannot hear is not worth a confirmation (and a kill could not reach it).
"""

from __future__ import annotations

from rigbench.ui.state import SafetyState
from rigbench.ui.widgets.dialogs import ConfirmDialog

CUT_OFF_TEXT = ("A software kill is not an emergency stop: is the hardware cut-off within "
                "reach?")


def refusal(state: SafetyState, *, has_link: bool) -> str:
    """Why a motor start must be refused before asking, in words; "" when it may be asked."""
    if not has_link:
        return "no link is open (Link screen: 5)"
    if state.link == "lost":
        return "the link is lost: the board cannot be heard, and a kill could not reach it"
    if state.link == "closed":
        return "the link is closed"
    if state.link == "reset":
        return "the board restarted and the handshake is not done yet"
    if state.alarm:
        return f"{state.alarm.lower()}: wait until the board is heard again"
    return ""


def start_body(state: SafetyState, what: str) -> str:
    """The confirmation's text: ``what`` will happen, the interlock now, the cut-off."""
    body = what.rstrip() + "\n\n"
    if state.motor == "tripped":
        body += (f"The motor is tripped ({state.fault or 'cause not given'}): the board will "
                 "refuse until the fault is cleared (c).")
    elif state.why and state.motor == "off":
        body += "The board would refuse to arm now: " + "; ".join(state.why) + "."
    elif state.motor in ("armed", "running"):
        body += f"The motor is {state.motor} now."
    else:
        body += "Every interlock condition holds now."
    return body + "\n\n" + CUT_OFF_TEXT


def refused(app, what: str) -> bool:
    """Say so and return True when a motor start must be refused now (see :func:`refusal`)."""
    app.update_safety()
    why_not = refusal(app.safety, has_link=app.link is not None)
    if why_not:
        app.note(f"{what} refused: {why_not}")
        app.notify(f"{what} refused: {why_not}", title="Motor not started", severity="error")
        app.update_safety()
    return bool(why_not)


def ask_motor_start(app, title: str, what: str, confirm: str, on_yes, *,
                    cancelled: str = "") -> bool:
    """Ask ``title`` with ``what`` and run ``on_yes()`` on a deliberate yes. Refused without
    asking while the link cannot carry a kill. Returns whether the question was asked."""
    if refused(app, confirm):
        return False

    def answered(yes: bool | None) -> None:
        if yes:
            if not refused(app, confirm):  # the link may have gone while the dialog was up
                on_yes()
        else:
            app.note(cancelled or f"{confirm.lower()} cancelled: nothing was started")
            app.update_safety()

    app.push_screen(ConfirmDialog(title, start_body(app.safety, what), confirm), answered)
    return True


class QuitMixin:
    """The App's quit: disarm and stop the stream first, ask while the motor is armed.
    Mixed into RigApp (uses its ``safety``, ``memory``, ``close_link``, ...)."""

    async def action_quit(self) -> None:
        """Quit; with the motor armed or running (or last known so), ask first."""
        state = self.safety
        motor = state.motor
        if state.kill_blocked and self.memory is not None:
            motor = self.memory.motor or motor
        if motor not in ("armed", "running"):
            self.leave()
            return
        if self._asking_quit:
            return
        self._asking_quit = True
        if state.kill_blocked:
            body = (f"The motor was {motor} when the link was lost, and a kill cannot reach "
                    "the board. Quitting gives up reconnecting; the board's watchdog turns "
                    "the motor off when heartbeats stop. Use the hardware cut-off.")
        else:
            body = (f"The motor is {motor}. Quitting disarms it and stops the telemetry "
                    "stream first. Should the disarm not arrive, the board's watchdog turns "
                    "the motor off when heartbeats stop.")
        body += "\n\n" + CUT_OFF_TEXT
        label = "Quit anyway" if state.kill_blocked else "Disarm and quit"
        self.push_screen(ConfirmDialog(f"Quit with the motor {motor}?", body, label),
                         self._quit_answered)

    def _quit_answered(self, yes: bool | None) -> None:
        self._asking_quit = False
        if yes:
            self.leave()
        else:
            self.note("quit cancelled")

    def leave(self) -> None:
        """Disarm, stop the stream, close the port, exit."""
        self.close_link(disarm=True)
        self.exit()
