"""Why a run ended, and the exit code the command line gives for it: one table.

Every experiment (relay, sweep, the guarded runner) and every sequence names why it stopped
with one of the reasons in ``STOPS``; each reason says whether the motor was killed for it
and which exit code a command returns. The exit codes are documented in the README.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["EXIT_OK", "EXIT_INTERNAL", "EXIT_USAGE", "EXIT_LINK", "EXIT_REFUSED", "EXIT_TRIP",
           "EXIT_CHECK", "EXIT_DISK", "EXIT_INTERRUPTED", "EXIT_CODES", "Stop", "STOPS", "kills_motor",
           "exit_code_for"]

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_USAGE = 2
EXIT_LINK = 3
EXIT_REFUSED = 4
EXIT_TRIP = 5
EXIT_CHECK = 6
EXIT_DISK = 7
EXIT_INTERRUPTED = 130

EXIT_CODES: dict[int, str] = {
    EXIT_OK: "ok",
    EXIT_INTERNAL: "internal error (a bug in rigbench: run again with --debug and report it)",
    EXIT_USAGE: "usage: bad arguments or a file given on the command line cannot be used",
    EXIT_LINK: "link: port missing, busy or not permitted; link lost; no reply from the board",
    EXIT_REFUSED: "the board refused a command",
    EXIT_TRIP: "a guard tripped or a safety stop ended the run",
    EXIT_CHECK: "a check failed",
    EXIT_DISK: "results could not be written (disk full, I/O error): the recording ends at its"
               " last whole line and is marked incomplete; a running experiment was stopped",
    EXIT_INTERRUPTED: "interrupted (Ctrl-C)",
}


@dataclass(frozen=True)
class Stop:
    """One reason a run ended: whether the motor was killed for it, and the exit code."""

    reason: str
    kills_motor: bool
    exit_code: int
    meaning: str


STOPS: dict[str, Stop] = {s.reason: s for s in (
    Stop("done", False, EXIT_OK, "every step ran"),
    Stop("converged", False, EXIT_OK, "the relay cycles agreed"),
    Stop("gave_up", False, EXIT_CHECK, "no regular relay cycle within the time allowed"),
    Stop("failed", False, EXIT_CHECK, "a step could not produce its result"),
    Stop("cancelled", False, EXIT_INTERRUPTED, "stopped by the user, in an orderly way"),
    Stop("guard", True, EXIT_TRIP, "a host guard tripped: motor killed"),
    Stop("trip", True, EXIT_TRIP, "the board tripped: motor off"),
    Stop("fell", True, EXIT_TRIP, "the rig fell during a sweep: motor killed"),
    Stop("stale", True, EXIT_TRIP, "telemetry stopped arriving: motor killed"),
    Stop("reset", True, EXIT_TRIP, "the board restarted: motor killed"),
    Stop("timeout", False, EXIT_TRIP, "a step took longer than its timeout: stopped"),
    Stop("disk", True, EXIT_DISK, "results could not be written (disk full): motor killed"),
    Stop("lost", True, EXIT_LINK, "the link was lost: kill sent where possible"),
    Stop("refused", False, EXIT_REFUSED, "the board refused a command or to arm"),
    Stop("error", False, EXIT_INTERNAL, "an unexpected error: motor switched off"),
)}


def kills_motor(reason: str) -> bool:
    """Whether a run that stopped for ``reason`` killed the motor."""
    return STOPS[reason].kills_motor if reason in STOPS else True


def exit_code_for(reason: str) -> int:
    """The exit code of a command whose run stopped for ``reason``."""
    return STOPS[reason].exit_code if reason in STOPS else EXIT_INTERNAL
