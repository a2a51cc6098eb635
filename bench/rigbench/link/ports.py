"""The serial ports this computer has, for the port pickers of the CLI and the UI.

Listing only: ports are opened by ``Link.open``. Pseudo-terminals (``rigbench sim``) are not
listed by the operating system's port enumeration.
"""

from __future__ import annotations

from dataclasses import dataclass

from serial.tools import list_ports as _list_ports


@dataclass(frozen=True)
class PortInfo:
    """One serial port: its device path, the description and hardware id the OS gives."""

    device: str
    description: str
    hwid: str


def list_ports() -> list[PortInfo]:
    """Every serial port the operating system lists, sorted by device path."""
    return [PortInfo(p.device, p.description or "", p.hwid or "")
            for p in sorted(_list_ports.comports(), key=lambda p: p.device)]
