"""Pushing a gain profile to a board: check, compare, send once, read back, optionally save.

``push_profile(link, profile)`` follows the order that keeps a live rig safe:
1. check the profile against what the board declares (parameters, units, ranges, access,
   loop, rig kind) and refuse — before anything is sent — if anything does not fit;
2. ask the board's status and refuse while a relay test, open-loop run or injection runs;
3. read the current values and show the difference;
4. send every value in ONE ``set`` (atomic on the board, PROTOCOL.md §5.5);
5. read back with ``get`` and compare to 7 significant digits (what the protocol carries);
6. look for a board restart between the ``set`` and the read-back (a reset seen by the link,
   a ``boot`` event, or values back to what the board had before);
7. with ``persist``, ``save`` and check the CRC-16 the board reports against the image
   text built from values read back (PROTOCOL.md §5.5).
It never arms, disarms or changes the mode.

``link`` is anything with the Link interface (``info``, ``params``, ``loops``, ``get``,
``set``, ``status``, ``save``, ``health``, ``event_cursor``, ``events_since``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from rigbench.link.records import SaveResult
from rigbench.profiles.diff import DiffRow, diff_profiles, same_value
from rigbench.profiles.model import Problem, Profile, check_against_board, read_values
from rigbench.wire.crc import crc16
from rigbench.wire.describe import format_value

__all__ = ["BUSY_MODES", "PushRefused", "PushReport", "push_profile",
           "board_values_profile", "image_crc"]

BUSY_MODES = ("relay", "open", "inject")


class PushRefused(Exception):
    """The profile was not sent: ``problems`` say why (nothing reached the board)."""

    def __init__(self, problems: list[Problem], path: str | None = None) -> None:
        self.problems = problems
        self.path = path
        lines = [p.format(path) for p in problems if p.severity == "error"]
        super().__init__("profile refused, nothing sent:\n  " + "\n  ".join(lines))


@dataclass(frozen=True)
class PushReport:
    profile: Profile
    board: str
    before: dict[str, float]  # the board's values before the push
    rows: list[DiffRow]  # board before (a) against the profile (b)
    warnings: list[Problem] = field(default_factory=list)
    dry_run: bool = False
    applied: dict[str, float] = field(default_factory=dict)  # as the set reply gives them
    readback: dict[str, float] = field(default_factory=dict)
    mismatches: tuple[str, ...] = ()  # names whose read-back differs from the profile
    reset: str | None = None  # why we think the board restarted, if it did
    save: SaveResult | None = None  # the board's save reply, CRC from read-back values

    @property
    def ok(self) -> bool:
        return (not self.mismatches and self.reset is None
                and (self.save is None or self.save.verified))


def image_crc(names: list[str], values: dict[str, float]) -> int:
    """CRC-16 of the stored image (PROTOCOL.md §5.5): ``name=value`` for every writable
    parameter in declaration order, single spaces, values formatted as in replies."""
    text = " ".join(f"{n}={format_value(values[n])}" for n in names)
    return crc16(text.encode("ascii"))


def board_values_profile(profile: Profile, values: dict[str, float]) -> Profile:
    """``profile`` with each setting's value replaced by ``values`` (e.g. the board's now)."""
    def swap(items):
        return {n: replace(s, value=values[n]) for n, s in items.items() if n in values}
    return replace(profile, gains=swap(profile.gains), limits=swap(profile.limits))


def _resets(link) -> int:
    try:
        return int(link.health().resets)
    except AttributeError:  # a link-like object without health figures
        return 0


def _reset_reason(link, event_cursor, resets_before: int, before, wanted, readback,
                  digits: int) -> str | None:
    if _resets(link) > resets_before:
        return "the link saw the board restart"
    if event_cursor is not None:
        _, events = link.events_since(event_cursor)
        for ev in events:
            if ev.kind in ("boot", "reset"):
                return f"the board reported a restart ({ev.kind})"
    changed = [n for n in wanted if not same_value(before[n], wanted[n], digits=digits)]
    if changed and all(same_value(readback[n], before[n], digits=digits) for n in changed):
        return ("every changed value reads back as it was before the push: the board may "
                "have restarted or dropped the set")
    return None


def push_profile(link, profile: Profile, *, persist: bool = False, dry_run: bool = False,
                 busy_modes: tuple[str, ...] = BUSY_MODES, digits: int = 7) -> PushReport:
    """Check, send and verify ``profile`` (see the module docstring).

    Raises PushRefused before sending anything when the profile does not fit the board or
    the board is busy; BoardRefused / LinkError from the link pass through (a refused
    ``set`` changes nothing on the board, PROTOCOL.md §5.5).
    """
    problems = check_against_board(profile, link.params, link.loops, info=link.info)
    errors = [p for p in problems if p.severity == "error"]
    if errors:
        raise PushRefused(problems, profile.path)
    warnings = [p for p in problems if p.severity != "error"]
    status = link.status()
    if status.mode in busy_modes:
        raise PushRefused([Problem("mode", f"the board is running mode {status.mode!r}"
                                   f"{' on loop ' + status.loop if status.loop else ''}; "
                                   "stop it first (gains are not changed mid-experiment)")],
                          profile.path)
    wanted = profile.values()
    before = read_values(link, wanted)
    rows = diff_profiles(board_values_profile(profile, before), profile, digits=digits)
    report = PushReport(profile=profile, board=link.info.board, before=before, rows=rows,
                        warnings=warnings, dry_run=dry_run)
    if dry_run:
        return report

    resets_before = _resets(link)
    cursor = link.event_cursor() if hasattr(link, "event_cursor") else None
    applied = link.set(**wanted)
    readback = read_values(link, wanted)
    mismatches = tuple(n for n in wanted if not same_value(readback[n], wanted[n], digits=digits))
    reset = _reset_reason(link, cursor, resets_before, before, wanted, readback, digits)
    report = replace(report, applied=dict(applied), readback=readback, mismatches=mismatches,
                     reset=reset)
    if not persist or not report.ok:
        return report

    result = link.save(verify=False)
    writable = [p.name for p in link.params.values() if p.writable]
    stored = read_values(link, writable)
    check = SaveResult(count=result.count, crc=result.crc, host_crc=image_crc(writable, stored),
                      expected_count=len(writable))
    late = [n for n in wanted if not same_value(stored[n], wanted[n], digits=digits)]
    reset = _reset_reason(link, cursor, resets_before, before, wanted, stored, digits)
    return replace(report, save=check, reset=reset,
                   mismatches=tuple(dict.fromkeys(mismatches + tuple(late))))
