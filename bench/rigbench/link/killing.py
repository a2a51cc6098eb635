"""A kill the board must confirm, and what the host does when it does not (PROTOCOL.md §7).

``kill_and_confirm(link)`` sends the kill byte three times ahead of anything queued, then
waits for the board to report its motor stopped: an ``ev trip``, a status or a reply
showing ``tripped`` (or ``off``), within ``confirm_s`` (link-clock seconds). If nothing
comes it asks ``status``. A kill still unconfirmed then **escalates**: the framed ``kill``,
then ``disarm`` (both get through when only the kill bytes were lost), and if the board
still reports nothing stopped the heartbeat is stopped so that the board's watchdog trips
the motor within its ``watchdog_ms`` (§7.2); the link waits that long for the trip. Every
step is logged as a link event; the outcome (a ``KillOutcome``) says whether the board
confirmed and whether it took escalation, so a command can tell the user to cut power.
"""

from __future__ import annotations

from dataclasses import dataclass

from rigbench.wire.messages import Disarm, Kill, StatusRequest

from rigbench.link.errors import BoardRefused, LinkError
from rigbench.link.records import LinkEvent

__all__ = ["KillOutcome", "kill_and_confirm", "CONFIRM_S", "CUT_POWER"]

CONFIRM_S = 0.25     # link-clock seconds for the board's ev trip after the kill bytes
STEP_TIMEOUT_S = 0.2  # each escalation request (a board replies within 50 ms, §4.2)
STOPPED = ("off", "tripped")
CUT_POWER = ("the board did not confirm the kill bytes: the host escalated (framed kill, "
             "disarm, heartbeat stopped for the watchdog); check the rig and cut motor "
             "power if anything moves")


@dataclass(frozen=True)
class KillOutcome:
    """What a kill achieved. Times in link-clock seconds."""

    sent_s: float                 # when the kill bytes were written
    confirmed: bool               # the board reported its motor off or tripped
    escalated: bool               # the kill bytes alone were not confirmed
    motor: str | None             # the motor state last reported
    steps: tuple[str, ...] = ()   # escalation steps taken, in order
    confirmed_s: float | None = None


def _stopped_reports(link) -> int:
    return link.channel.ingest.stop_reports


def kill_and_confirm(link, *, reason: str = "user", confirm_s: float = CONFIRM_S,
                     watchdog_margin_s: float = 0.3, on_sent=None) -> KillOutcome:
    """Kill, wait for the board to confirm, escalate if it does not (module docstring).
    ``on_sent(t)`` is called as soon as the kill bytes are written."""
    ch = link.channel
    before = _stopped_reports(link)
    t = ch.write_kill(3, reason=reason)
    if on_sent is not None:
        try:
            on_sent(t)
        except OSError:
            pass

    def reported() -> bool:
        return _stopped_reports(link) > before

    def done(steps=(), escalated=False) -> KillOutcome:
        return KillOutcome(t, True, escalated, link.motor_state, tuple(steps), link.now())

    try:
        if link.wait_until(reported, confirm_s):
            return done()
        if _ask(link, StatusRequest) in STOPPED:
            return done()
    except LinkError:
        pass   # escalate below: the requests may still get through
    steps = []
    ch.events.append(LinkEvent(link.now(), None, "link", "kill_unconfirmed", {"by": reason}))
    motors = []
    for cls, name in ((Kill, "framed kill"), (Disarm, "disarm")):
        steps.append(name)
        try:
            motors.append(_ask(link, cls))
        except LinkError:
            motors.append(None)
    if any(m in STOPPED for m in motors):
        return done(steps, True)
    steps.append("heartbeat stopped")
    ch.stop_heartbeat()
    watchdog_s = (link.info.watchdog_ms / 1000.0) if link.info else 1.0
    try:
        ok = link.wait_until(reported, watchdog_s + watchdog_margin_s)
    except LinkError:
        ok = False
    if ok:
        ch.resume_heartbeat()   # tripped: the heartbeat may flow again (arming needs it)
        return done(steps, True)
    return KillOutcome(t, False, True, link.motor_state, tuple(steps), None)


def _ask(link, cls) -> str | None:
    """The motor state the reply to ``cls`` reports (None when it names none)."""
    try:
        reply = link.channel.request(cls, timeout_s=STEP_TIMEOUT_S, retries=1)
    except BoardRefused:
        return None
    return reply.get("motor")

