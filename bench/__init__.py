"""rigbench: tune, verify and document the control loops of actively balanced rigs.

Importing the package registers its pyserial URL handlers (``sim://``, ``replay://``)
so that ``serial.serial_for_url`` understands them anywhere the package is imported.
"""

__version__ = "0.1.0"


def _register_url_handlers() -> None:
    import serial

    pkg = "bench.handlers"
    if pkg not in serial.protocol_handler_packages:
        serial.protocol_handler_packages.append(pkg)


_register_url_handlers()
