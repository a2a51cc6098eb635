"""What a simulated board of a given rig declares in discovery (PROTOCOL.md §5), built from
its declaration in bench/rigbench/rig/firmware/boards.py without opening a port: for tests of profiles and
sequences checked against a board."""

from __future__ import annotations

from rigbench.rig.firmware.boards import rig_def
from rigbench.wire.describe import BoardInfo, ParamInfo


def declared(rig: str):
    """(params by name, loops by name, signal names, BoardInfo) of the simulated ``rig``."""
    rd = rig_def(rig)
    params = {p.name: ParamInfo(i, p.name, p.unit, p.minimum, p.maximum, p.default, p.writable)
              for i, p in enumerate(rd.params)}
    loops = {lp.name: lp.declared(i) for i, lp in enumerate(rd.loops)}
    info = BoardInfo((1, 0), rd.board, "0.1.0", rd.rig, rd.rate_hz, rd.watchdog_ms,
                     len(params), len(rd.signals), len(loops), True)
    return params, loops, [s.name for s in rd.signals], info
