"""The I/O layer: a Link to one board over any pyserial URL (device path, ``socket://``,
``sim://...``), with one reader thread, kill ahead of everything, the heartbeat, telemetry
in a ring buffer read by cursor, and link health.

Must not import bench.rig, bench.ui, Textual or domain modules.
"""

from .clock import RealClock
from .errors import (
    BoardRefused, IncompatibleBoard, LinkError, LinkLost, LinkTimeout, SaveMismatch,
)
from .link import Link
from .records import LINK_STATES, BoardStatus, LinkEvent, LinkHealth, RawLine, SaveResult
from .ring import TelemetryBlock
from .timebase import BoardClock, ClockMap, FrameCounter

__all__ = [
    "Link", "LinkError", "LinkLost", "LinkTimeout", "IncompatibleBoard", "BoardRefused",
    "SaveMismatch", "BoardStatus", "LinkEvent", "LinkHealth", "RawLine", "SaveResult", "LINK_STATES",
    "TelemetryBlock", "RealClock", "BoardClock", "ClockMap", "FrameCounter",
]
