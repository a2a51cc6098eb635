"""The part of a pyserial port that the in-process URL handlers (``sim://``, ``replay://``)
share: a ``SerialBase`` with a board behind it in this process, so no line settings, no
modem lines and no output queue.

``BoardPort`` answers those parts of pyserial's API the same way for both handlers (a
baud rate or RTS/DTR change does nothing; CTS, DSR and CD read high, RI low; writes go
straight to the board, so ``out_waiting`` is 0 and ``cancel_write`` has nothing to stop)
and gives the two checks they both make: ``_check_can_open`` (not open yet, a URL given)
and ``_check_open``. Each handler's ``Serial`` subclasses it and implements ``open``,
``close``, ``from_url``, ``read``, ``write``, ``in_waiting``, ``reset_input_buffer`` and
``cancel_read``.
"""

from __future__ import annotations

from serial.serialutil import PortNotOpenError, SerialBase, SerialException

__all__ = ["BoardPort"]


class BoardPort(SerialBase):
    """A pyserial port whose board runs in this process (see the module docstring)."""

    def _check_can_open(self) -> None:
        if self.is_open:
            raise SerialException("Port is already open.")
        if self._port is None:
            raise SerialException("Port must be configured before it can be used.")

    def _check_open(self) -> None:
        if not self.is_open:
            raise PortNotOpenError()

    def _reconfigure_port(self) -> None:
        pass  # no line settings: the board is in this process, there is no baud rate

    def reset_output_buffer(self) -> None:
        self._check_open()

    @property
    def out_waiting(self) -> int:
        return 0

    def cancel_write(self) -> None:
        pass

    def _update_break_state(self) -> None:
        pass

    def _update_rts_state(self) -> None:
        pass

    def _update_dtr_state(self) -> None:
        pass

    @property
    def cts(self) -> bool:
        return True

    @property
    def dsr(self) -> bool:
        return True

    @property
    def ri(self) -> bool:
        return False

    @property
    def cd(self) -> bool:
        return True
