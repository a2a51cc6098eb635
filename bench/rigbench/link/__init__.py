"""The I/O layer: a Link to one board over any pyserial URL (device path, ``socket://``,
``sim://...``), with one reader thread, kill ahead of everything, the heartbeat, telemetry
in a ring buffer read by cursor, and link health.
"""

from rigbench.base.clock import RealClock
from rigbench.link.errors import (
    BoardRefused, IncompatibleBoard, LinkError, LinkLost, LinkTimeout, SaveMismatch,
)
from rigbench.link.link import Link
from rigbench.link.records import LINK_STATES, BoardStatus, LinkEvent, LinkHealth, RawLine, SaveResult
from rigbench.link.ring import TelemetryBlock
from rigbench.link.timebase import BoardClock, ClockMap, FrameCounter

__all__ = [
    "Link", "LinkError", "LinkLost", "LinkTimeout", "IncompatibleBoard", "BoardRefused",
    "SaveMismatch", "BoardStatus", "LinkEvent", "LinkHealth", "RawLine", "SaveResult", "LINK_STATES",
    "TelemetryBlock", "RealClock", "BoardClock", "ClockMap", "FrameCounter",
]
