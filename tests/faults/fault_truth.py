"""The truth behind the fault tests: what the simulated board really sent (tapped before
the simulated line), what the host accepted, and whether a recording is in order; plus the
``Outcome`` each scenario returns.

Helpers for tests/faults and scripts/fault_table.py only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rigbench.link import BoardStatus, Link
from rigbench.link.timebase import U32
from rigbench.recordings.recording import load_recording
from rigbench.wire import HostCodec
from rigbench.wire import messages as m


class BoardTap:
    """What the board put on the wire, read from its transmit side before the line."""

    def __init__(self, board) -> None:
        self.codec = HostCodec()
        self.telemetry: dict[tuple[int, int], tuple[float, ...]] = {}
        self.statuses: set = set()
        self.events: set = set()
        self.sent = 0
        self.ambiguous = 0
        inner = board.output

        def output(max_bytes=None):
            data = inner(max_bytes)
            self._feed(data)
            return data

        board.output = output  # instance attribute: SimLink.drain calls it

    def _feed(self, data: bytes) -> None:
        for msg in self.codec.receive(data):
            if isinstance(msg, m.Telemetry):
                key = (msg.frame, msg.time_us)
                self.sent += 1
                if key in self.telemetry and self.telemetry[key] != msg.values:
                    self.ambiguous += 1
                self.telemetry[key] = msg.values
            elif isinstance(msg, m.Status):
                self.statuses.add(status_key(BoardStatus.from_fields(
                    msg.fields, board_time_s=msg.time_us * 1e-6, host_time_s=0.0)))
            elif isinstance(msg, m.Event):
                self.events.add((msg.time_us, msg.kind, tuple(sorted(msg.fields))))


def status_key(st: BoardStatus) -> tuple:
    return (round(st.board_time_s * 1e6) % U32, st.mode, st.loop, st.motor, st.fault, st.why,
            st.drops, st.rx_err, round(st.heartbeat_age_s * 1e3))


@dataclass(frozen=True)
class Accepted:
    """What the host accepted, compared with what the board sent."""

    rows: int          # telemetry rows in the host's ring
    wrong: int         # rows, status frames and board events not exactly as sent
    statuses: int
    events: int


def compare(link: Link, tap: BoardTap) -> Accepted:
    _, block = link.read_since(0)
    wrong = 0
    for frame, board_s, values in zip(block.frame, block.board_time_s, block.values):
        key = (int(frame) % U32, round(float(board_s) * 1e6) % U32)
        if tap.telemetry.get(key) != tuple(float(v) for v in values):
            wrong += 1
    _, statuses = link.statuses_since(0)
    wrong += sum(status_key(st) not in tap.statuses for st in statuses)
    _, events = link.events_since(0)
    board_events = [e for e in events if e.source == "board"]
    for e in board_events:
        key = (round(e.board_time_s * 1e6) % U32, e.kind,
               tuple(sorted((k, str(v)) for k, v in e.fields.items())))
        wrong += key not in tap.events
    return Accepted(len(block), wrong, len(statuses), len(board_events))


# --------------------------------------------------------------------------- outcomes

# What a CRC-16 lets through. CRC-16/IBM-3740 (polynomial 0x1021) has Hamming distance 4 at
# these frame lengths: every frame with up to three flipped bits is caught (Koopman &
# Chakravarty 2004, "Cyclic redundancy code (CRC) polynomial selection for embedded
# networks", DSN; value from memory). A line that lost or gained bytes is, to the CRC, a
# random body, and passes with probability 2^-16 (common practice, no source).
CRC_PASS = 2.0 ** -16
DAMAGE = ("none", "bit flips", "bytes lost or inserted")


def wrong_allowed(lines_damaged: int, damage: str, *, p_exceed: float = 1e-6) -> int:
    """The most wrong frames a CRC-16 lets through among ``lines_damaged`` damaged lines,
    except with probability ``p_exceed`` (Poisson tail). 0 for no damage or bit flips (a
    frame with four or more flipped bits is too rare at the rates tried to count)."""
    if damage not in DAMAGE:
        raise ValueError(f"damage must be one of {DAMAGE}")
    if damage != "bytes lost or inserted":
        return 0
    lam = lines_damaged * CRC_PASS
    k, term, tail = 0, math.exp(-lam), 1.0 - math.exp(-lam)   # tail = P(X > k)
    while tail > p_exceed:
        k += 1
        term *= lam / k
        tail -= term
    return k



@dataclass
class Outcome:
    """One scenario's figures (see the module docstring)."""

    scenario: str
    fault: str
    sim_s: float = 0.0                 # link-clock seconds the scenario ran
    states_seen: list = field(default_factory=list)   # link states, in order of change
    link_state: str = ""               # what the host showed at the end
    stopped_by: str | None = None      # an experiment's stop reason
    host_motor: str | None = None      # the motor state the host believed at the end
    line_bytes_hit: int = 0            # bytes the simulated line corrupted or dropped
    frames_sent: int = 0               # telemetry frames the board sent
    frames_accepted: int = 0           # telemetry rows the host accepted
    lines_rejected: int = 0            # received lines the host refused (all codes)
    accepted_wrong: int = 0            # accepted rows/status/events not as sent
    damage: str = "none"               # what the fault does to lines (DAMAGE)
    telemetry_lost: int = 0            # sent but not accepted
    host_counted_lost: int = 0         # telemetry the host counted missing (frame gaps)
    unseen_ends: int = 0               # sent before the first or after the last accepted
    host_events: list = field(default_factory=list)   # link happenings and board trips seen
    resends: int = 0
    motor_end: str = ""                # the board's own motor state at the end
    fault_end: str | None = None       # the board's latched fault at the end
    recording_rows: int | None = None
    recording_ok: bool | None = None   # loads, frames rise, host time never goes back
    recording_gap_s: float | None = None   # board time from the last recorded row to the fault
    notes: str = ""
    settings: str = "defaults"         # link settings other than the CLI's defaults

    @property
    def motor_off(self) -> bool:
        return self.motor_end in ("off", "tripped")

    @property
    def wrong_allowed(self) -> int:
        """Wrong frames a CRC-16 may let through here (see ``wrong_allowed``)."""
        return wrong_allowed(self.lines_rejected, self.damage)


class StateLog:
    """Link states seen at each poll, kept when they change."""

    def __init__(self, link: Link) -> None:
        self.link = link
        self.seen: list[str] = []

    def __call__(self) -> bool:
        state = self.link.state
        if not self.seen or self.seen[-1] != state:
            self.seen.append(state)
        return False  # as an ``until`` callback: never ends a wait early



@dataclass(frozen=True)
class RecordingCheck:
    rows: int
    in_order: bool        # frames rise within each board boot, host time never goes back
    gap_s: float | None   # board time from the last row before the fault to the fault


def check_recording(path: Path, *, fault_board_s: float | None = None) -> RecordingCheck:
    """Load a recording and check its order; the last row before the fault is the last
    row of the first board boot stamped no later than the fault (a host that waits for its
    kill to be confirmed goes on recording after a stall)."""
    rec = load_recording(path)
    frames, host_t = rec.frame, rec.host_time_s
    boots = np.flatnonzero(np.diff(rec.board_time_s) < 0) + 1   # a restart starts a segment
    ok = bool(np.all(np.diff(host_t) >= 0))
    for seg in np.split(frames, boots):
        ok = ok and bool(np.all(np.diff(seg) > 0))
    gap = None
    if fault_board_s is not None and len(rec):
        first_boot = np.split(rec.board_time_s, boots)[0]
        before = first_boot[first_boot <= fault_board_s + 1e-9]
        gap = fault_board_s - float(before[-1] if len(before) else first_boot[-1])
    return RecordingCheck(len(rec), ok, gap)


def note_recording(out: Outcome, path: Path, fault_board_s: float | None = None) -> None:
    check = check_recording(path, fault_board_s=fault_board_s)
    out.recording_rows, out.recording_ok, out.recording_gap_s = (
        check.rows, check.in_order, check.gap_s)
