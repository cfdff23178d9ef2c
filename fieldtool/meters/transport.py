"""One small transport interface for meters, and the serial implementation of it."""

from __future__ import annotations

from typing import Protocol

import serial
from serial.serialutil import Timeout

from fieldtool.meters.errors import PORT_ERRORS, MeterTimeout, port_errors


class Transport(Protocol):
    """What a meter driver needs: write bytes, read a line, close."""

    name: str

    def write(self, data: bytes) -> None:
        """Send bytes to the meter."""

    def readline(self, timeout: float) -> bytes:
        """One complete line including its terminator, or MeterTimeout."""

    def discard_stale(self) -> None:
        """Throw away input that arrived before now."""

    def close(self) -> None:
        """Release the port."""


class SerialTransport:
    """A transport over an already-open pyserial port (a device, a pty or ``loop://``)."""

    def __init__(self, port: serial.SerialBase, terminator: bytes = b"\n", name: str = "") -> None:
        self.port = port
        self.terminator = terminator
        self.name = name or port.port or "serial port"
        self._pending = b""

    def write(self, data: bytes) -> None:
        """Send bytes to the meter."""
        with port_errors(self.name):
            self.port.write(data)
            self.port.flush()

    def readline(self, timeout: float) -> bytes:
        """One complete line ending in the terminator; a partial line is a MeterTimeout."""
        deadline = Timeout(timeout)
        end = self.terminator[-1:]
        while True:
            cut = self._pending.find(end)
            if cut >= 0:
                line, self._pending = self._pending[: cut + 1], self._pending[cut + 1 :]
                return line
            if deadline.expired():
                partial, self._pending = self._pending, b""
                got = f"only a partial line {partial!r}" if partial else "nothing"
                raise MeterTimeout(
                    f"{self.name}: {got} within {timeout:g} s; check baud rate, terminator"
                    " and that the meter is in remote/output mode"
                )
            with port_errors(self.name):
                self.port.timeout = min(deadline.time_left(), 0.05)
                chunk = self.port.read(self.port.in_waiting or 1)
            self._pending += chunk

    def discard_stale(self) -> None:
        """Throw away buffered input, ours and the driver's."""
        self._pending = b""
        with port_errors(self.name):
            self.port.reset_input_buffer()

    def close(self) -> None:
        """Close the port; closing twice, or a port already gone, is harmless."""
        try:
            self.port.close()
        except PORT_ERRORS:
            pass  # the port is already gone; nothing left to release


def open_port(name: str, baud: int = 9600, timeout: float = 2.0, terminator: bytes = b"\n"):
    """Open a device path or pyserial URL (``loop://``, ``socket://``, ``rfc2217://``)."""
    with port_errors(name, opening=True):
        port = serial.serial_for_url(name, baudrate=baud, timeout=timeout, exclusive=True)
    return SerialTransport(port, terminator=terminator, name=name)
