"""Registration of rigbench's pyserial URL schemes (``sim://``, ``replay://``).

pyserial's ``serial_for_url`` looks a scheme up as ``<package>.protocol_<scheme>`` in every
package named in ``serial.protocol_handler_packages``. Registering adds our handler package
to that list by name; nothing is imported until a URL with one of our schemes is opened.
It is done explicitly — by ``Link.open``, by the command line, or by a script that calls
``serial.serial_for_url`` itself — never as a side effect of importing a package.
"""

from __future__ import annotations

import serial

HANDLER_PACKAGE = "rigbench.handlers"


def register_url_handlers() -> None:
    """Make ``serial.serial_for_url`` understand ``sim://`` and ``replay://`` (idempotent)."""
    if HANDLER_PACKAGE not in serial.protocol_handler_packages:
        serial.protocol_handler_packages.append(HANDLER_PACKAGE)
