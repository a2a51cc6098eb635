"""What the safety bar shows, in words: one frozen snapshot built from the link's last
status and health, compared by value so the bar redraws only when something changed.

The words for interlock conditions and trip causes live here (PROTOCOL.md §6.3, §7.3), so
every screen says the same thing the same way. A plain function of the link's records; the
App feeds it from a timer.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

KILL_KEYS = ("ctrl+k", "f9")
KILL_KEYS_TEXT = "ctrl+k or F9"

# PROTOCOL.md §7.3: conditions that refuse `arm`, in words a person acts on.
INTERLOCK_WORDS = {
    "fault": "a fault is latched (clear it first)",
    "heartbeat": "no heartbeat",
    "tilt": "tilt outside arm window",
    "wheel": "wheel not stopped",
    "gains": "a gain is out of range",
}

# PROTOCOL.md §6.3: trip causes.
TRIP_WORDS = {
    "kill": "kill",
    "watchdog": "watchdog (heartbeat lost)",
    "tilt_limit": "tilt over its trip limit",
    "wheel_limit": "wheel speed over its trip limit",
    "relay_bound": "relay test left its bound",
    "output_limit": "output limit",
}


def interlock_words(conditions) -> list[str]:
    """Each failing arm condition in words (unknown ones are shown as the board names them)."""
    return [INTERLOCK_WORDS.get(c, c.replace("_", " ")) for c in conditions]


def trip_words(cause: str | None) -> str:
    if not cause:
        return ""
    if cause in TRIP_WORDS:
        return TRIP_WORDS[cause]
    if cause.endswith("_limit"):
        return f"{cause[:-6].replace('_', ' ')} over its trip limit"
    return cause.replace("_", " ")


@dataclass(frozen=True)
class SafetyState:
    """One snapshot of everything the safety bar shows."""

    link: str = "none"  # none | connecting | ok | stale | reset | lost | closed | failed
    port: str = ""
    frames_per_s: float = 0.0
    errors: int = 0  # bad frames + telemetry frames lost
    simulated: bool = False
    motor: str = "unknown"  # off | armed | running | tripped | unknown
    mode: str = ""
    fault: str = ""  # trip cause in words, "" when none
    why: tuple[str, ...] = ()  # failing arm conditions in words
    alarm: str = ""  # non-empty: the bar turns into an alarm with this headline
    alarm_detail: str = ""  # what happened, in words
    note: str = ""  # the last thing the app did or was told (kill sent, arm refused...)
    kill_blocked: bool = False  # the link cannot carry a kill: only the hardware cut-off can
    relink: str = ""  # how the app is getting the link back, in words

    @property
    def motor_text(self) -> str:
        if self.motor == "tripped" and self.fault:
            return f"tripped: {self.fault}"
        return self.motor


def refusal_words(code: str, text: str = "") -> str:
    """A board refusal (PROTOCOL.md §4.3) in words."""
    if code == "interlock":
        return "interlock: " + "; ".join(interlock_words([c for c in text.split(",") if c]))
    words = {
        "not_armed": "the motor is not armed (arm it first)",
        "range": "outside the board's range",
        "readonly": "that parameter is read-only",
        "busy": "the board is busy with a test on that loop",
        "state": "not allowed in the motor's present state",
        "storage": "the board's non-volatile memory failed",
        "unknown_name": "the board does not know that name",
        "version": "the board speaks another protocol version",
    }.get(code, code.replace("_", " "))
    return f"{words} ({text})" if text else words


def read_safety(link, *, port: str, note: str = "", failure: str = "",
                trip_cause: str | None = None, stale_after_s: float = 0.35,
                relink: str = "") -> SafetyState:
    """Build the bar's snapshot from a link (or ``None`` while none is open).

    ``failure`` is the last opening error in words; ``trip_cause`` the cause of the last
    trip event, shown until a status frame names the latched fault. The bar alarms when
    the link says it is stale, lost or reset, or when nothing has arrived for
    ``stale_after_s`` (link clock). The UI keeps telemetry streaming at 25 Hz or more, so
    a quiet link that long means trouble; polled at 10 Hz, the alarm shows within 0.45 s.

    A lost or closed link cannot carry a kill: ``kill_blocked`` is set and the motor is
    "unknown" (the board may have tripped on its watchdog, or not). ``relink`` says how
    the app is getting the link back.
    """
    if link is None:
        state = "failed" if failure else "connecting"
        return SafetyState(link=state, port=port, note=note,
                           alarm="NO LINK" if failure else "", alarm_detail=failure)
    health = link.health()
    status = link.last_status
    info = link.info
    bad = sum(health.bad_frames.values()) if health.bad_frames else 0
    errors = bad + health.lost_frames  # bad_frames counts CRC failures too
    alarm = detail = ""
    since = health.since_rx_s
    if health.state == "lost":
        alarm, detail = "LINK LOST", health.lost_reason or ""
    elif health.state == "closed":
        alarm = "LINK CLOSED"
    elif health.state == "reset":
        alarm, detail = "BOARD RESTARTED", "handshake again before trusting any state"
    elif health.state == "stale" or (since is not None and since > stale_after_s):
        age = f" for {since:.1f} s" if since is not None and math.isfinite(since) else ""
        alarm, detail = "TELEMETRY STALE", f"nothing received{age}"
    if alarm and detail:
        detail += "; the board's watchdog turns the motor off when heartbeats stop"
    kill_blocked = health.state in ("lost", "closed")
    # motor_state follows replies and trip events at once; status frames come 2-10 Hz
    motor = link.motor_state or (status.motor if status else "unknown")
    mode = status.mode if status else ""
    why = tuple(interlock_words(status.why)) if status else ()
    if kill_blocked:  # nothing the board said before still holds
        motor, mode, why = "unknown", "", ()
    fault = ""
    if motor == "tripped":
        fault = trip_words((status.fault if status and status.fault else None) or trip_cause)
    return SafetyState(
        link=health.state, port=port, frames_per_s=health.frames_per_s, errors=errors,
        simulated=bool(getattr(info, "simulated", False)), motor=motor, mode=mode,
        fault=fault, why=why, alarm=alarm, alarm_detail=detail, note=note,
        kill_blocked=kill_blocked, relink=relink if kill_blocked else "",
    )
