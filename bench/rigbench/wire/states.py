"""Motor states of the interlock and their transitions: one table of data (PROTOCOL.md §7).

The board applies it; the host uses the same table to explain states and to check that a
status it sees is reachable. States: ``off`` (disarmed, output zero), ``armed`` (enabled,
mode off, output zero), ``running`` (a mode drives the motor), ``tripped`` (fault latched,
output zero until cleared; clearing leads to ``off``, never to running).

No I/O.
"""

MOTOR_STATES = ("off", "armed", "running", "tripped")

# (state, happening) -> next state. A happening not listed for a state leaves it unchanged
# and, for commands, is refused with the code in REFUSALS.
TRANSITIONS: dict[tuple[str, str], str] = {
    ("off", "arm"): "armed",
    ("armed", "arm"): "armed",
    ("armed", "run"): "running",
    ("running", "run"): "running",
    ("running", "stop"): "armed",
    ("armed", "stop"): "armed",
    ("off", "stop"): "off",
    ("off", "disarm"): "off",
    ("armed", "disarm"): "off",
    ("running", "disarm"): "off",
    ("tripped", "disarm"): "tripped",
    ("off", "trip"): "tripped",
    ("armed", "trip"): "tripped",
    ("running", "trip"): "tripped",
    ("tripped", "trip"): "tripped",
    ("tripped", "clear"): "off",
    ("off", "clear"): "off",
    ("armed", "clear"): "armed",
    ("running", "clear"): "running",
    ("tripped", "stop"): "tripped",
}

# Error code for a refused happening, by (state, happening).
REFUSALS: dict[tuple[str, str], str] = {
    ("off", "run"): "not_armed",
    ("tripped", "run"): "not_armed",
    ("tripped", "arm"): "interlock",
    ("running", "arm"): "state",
}

# Interlock conditions the board checks before arming (PROTOCOL.md §7.3), in report order.
INTERLOCK_CONDITIONS = ("fault", "heartbeat", "tilt", "wheel", "gains")

# Common trip causes a board reports in ``ev <t> trip cause=...`` and ``st ... fault=...``.
# Not exhaustive: a board adds ``<signal>_limit`` for any ``trip_<signal>`` parameter, so a
# host must show an unknown cause as it is, never reject it.
TRIP_CAUSES = (
    "kill", "watchdog", "tilt_limit", "wheel_limit", "relay_bound", "reset", "output_limit",
)


def next_state(state: str, happening: str) -> str | None:
    """The state after ``happening`` in ``state``, or None when it is refused."""
    return TRANSITIONS.get((state, happening))
