"""Getting back in after a lost link: open the same URL again, handshake, and say what
changed on the board meanwhile. Never arms: the motor stays as the board left it (a board
that lost its heartbeat has tripped on its watchdog, one that restarted boots disarmed).

``remember(link)`` takes what the host knew (identity, writable parameter values, the
newest board clock seen, motor state, stream rate); ``reopen(memory)`` opens the URL in
``memory``, handshakes (a board that resets when its port opens prints boot text first:
the handshake's ``hello`` is retried for ``handshake_timeout_s`` and every line of text
that is not a frame is skipped and counted by the codec, PROTOCOL.md §2), restores the
stream rate, waits for one status frame and returns a :class:`Reopened` naming what
differs. ``compare(memory, link, ...)`` is the same comparison for a link that handshook
again by itself after a restart seen on a live port.

``device_present(url)`` tells whether a device path exists (a USB board that was pulled
out reappears under the same path); URLs that are not paths are always "present".

Times are seconds: board time from the board's 32-bit microsecond clock (PROTOCOL.md §6.1),
host time from ``time.monotonic``.
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass, field

from rigbench.link.link import Link
from rigbench.link.timebase import U32


@dataclass(frozen=True)
class LinkMemory:
    """What the host knew of a board before its link was lost."""

    url: str
    board: str
    firmware: str
    rig: str
    params: dict  # writable parameter name -> value (board units)
    gains: tuple[str, ...]  # names of the loops' gains (a subset of params)
    board_time_us: int | None  # newest board clock seen, modulo 2**32 µs
    seen_at_s: float  # time.monotonic() when it was taken
    motor: str | None
    stream_rate_hz: float | None


@dataclass(frozen=True)
class Reopened:
    """A link opened again and what differs from the :class:`LinkMemory`."""

    link: Link
    restarted: bool | None  # True: the board restarted; False: it kept running; None: unknown
    other_board: str  # "" or what differs in the board's identity
    motor: str  # motor state the board reports now (never armed by the reopen)
    fault: str | None  # latched fault, None when none
    gains_changed: dict = field(default_factory=dict)  # name -> (before, now)
    params_changed: dict = field(default_factory=dict)  # other writable params, same form
    skipped_lines: int = 0  # lines of boot text or garbage skipped before the handshake

    def changes(self) -> list[str]:
        """What changed, in words, most important first (empty: nothing seen)."""
        out = []
        if self.other_board:
            out.append(f"a different board answers: {self.other_board}")
        if self.restarted:
            out.append("the board restarted")
        elif self.restarted is None:
            out.append("cannot tell whether the board restarted")
        if self.fault:
            out.append(f"fault latched: {self.fault}")
        if self.gains_changed:
            out.append("gains differ from before: " + _pairs(self.gains_changed))
        if self.params_changed:
            out.append("parameters differ from before: " + _pairs(self.params_changed))
        if self.skipped_lines:
            out.append(f"{self.skipped_lines} lines of boot text or garbage skipped")
        return out


def _pairs(changed: dict) -> str:
    return ", ".join(f"{n} {a:g} → {b:g}" if isinstance(a, float) and isinstance(b, float)
                     else f"{n} {a} → {b}" for n, (a, b) in changed.items())


def _writable_values(link) -> dict:
    return {n: p.value for n, p in link.params.items() if getattr(p, "writable", False)}


def _gain_names(link) -> tuple[str, ...]:
    names: list[str] = []
    for lp in link.loops.values():
        names += [g for g in getattr(lp, "gains", ()) if g not in names]
    return tuple(names)


def _board_time_us(status) -> int | None:
    if status is None or status.board_time_s is None:
        return None
    return int(round(status.board_time_s * 1e6)) % U32


def remember(link) -> LinkMemory:
    """What ``link`` knows now (call it while the link works, or right after it is lost:
    nothing here talks to the board)."""
    info = link.info
    return LinkMemory(
        url=link.url, board=info.board, firmware=info.firmware, rig=info.rig,
        params=_writable_values(link), gains=_gain_names(link),
        board_time_us=_board_time_us(link.last_status), seen_at_s=time.monotonic(),
        motor=link.motor_state, stream_rate_hz=getattr(link, "_stream_rate_hz", None),
    )


def device_present(url: str) -> bool:
    """Whether the device at ``url`` exists now (True for URLs that are not paths)."""
    if "://" in url:
        return True
    return os.path.exists(url)


def _same(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        return math.isclose(a, b, rel_tol=1e-6, abs_tol=1e-12)
    return a == b


def _restarted(memory: LinkMemory, link, status, *, spare_s: float = 2.0) -> bool | None:
    """Whether the board restarted since ``memory``: a boot event on the new link (a board
    that resets when its port opens), or its clock behind where it was (a board powered
    again with its cable: its boot event went to nobody). A clock that went on, but by
    ``spare_s`` less than the time that passed, or that may have wrapped meanwhile (32-bit
    µs, about 71.6 min), cannot tell."""
    _, events = link.events_since(0)
    if any(ev.source == "board" and ev.kind == "boot" for ev in events):
        return True
    now_us = _board_time_us(status)
    if memory.board_time_us is None or now_us is None:
        return None
    elapsed_us = (time.monotonic() - memory.seen_at_s) * 1e6
    if memory.board_time_us + elapsed_us + spare_s * 1e6 >= U32:
        return None
    if now_us < memory.board_time_us:
        return True
    return None if now_us + spare_s * 1e6 < memory.board_time_us + elapsed_us else False


def compare(memory: LinkMemory, link, *, status=None, restarted: bool | None = None,
            skipped_lines: int = 0) -> Reopened:
    """What differs between ``memory`` and the board behind ``link`` (already handshaken).
    ``restarted`` given: taken as is (the link saw the restart itself)."""
    info = link.info
    other = [f"{what} {a} → {b}" for what, a, b in (
        ("board", memory.board, info.board), ("firmware", memory.firmware, info.firmware),
        ("rig", memory.rig, info.rig)) if a != b]
    now = _writable_values(link)
    gains, params = {}, {}
    for name, before in memory.params.items():
        if name in now and not _same(before, now[name]):
            (gains if name in memory.gains else params)[name] = (before, now[name])
    status = status if status is not None else link.last_status
    if restarted is None:
        restarted = _restarted(memory, link, status)
    motor = link.motor_state or (status.motor if status else "unknown")
    fault = status.fault if status else None
    return Reopened(link=link, restarted=restarted, other_board="; ".join(other),
                    motor=motor, fault=fault, gains_changed=gains, params_changed=params,
                    skipped_lines=skipped_lines)


def reopen(memory: LinkMemory, *, status_wait_s: float = 1.0, open_link=Link.open,
           **open_kwargs) -> Reopened:
    """Open ``memory.url`` again, handshake, restore the stream rate and compare.

    Raises LinkError (one line) when the board is not back yet; the caller tries again.
    ``open_link`` is ``Link.open`` or a function with its signature.
    """
    link = open_link(memory.url, **open_kwargs)
    try:
        skipped = sum(link.health().bad_frames.values())
        if memory.stream_rate_hz:
            link.stream(memory.stream_rate_hz)
        # status frames come at 2 to 10 Hz (PROTOCOL.md §6.2): one names fault and clock
        link.wait_until(lambda: link.last_status is not None, status_wait_s)
        if link.last_status is None:
            status = link.status()  # the reply has no board clock: restart may be unknown
        else:
            status = link.last_status
        return compare(memory, link, status=status, skipped_lines=skipped)
    except BaseException:
        link.close()
        raise
