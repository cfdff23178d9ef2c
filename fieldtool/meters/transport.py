"""One small transport interface for meters, and the serial implementation of it."""

from __future__ import annotations

from typing import Protocol
from urllib.parse import urlsplit

import serial
from serial.serialutil import Timeout

from fieldtool.core.errors import shown
from fieldtool.meters.errors import PORT_ERRORS, MeterSettingsError, MeterTimeout, port_errors


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


# pyserial's URL handlers (serial.urlhandler.protocol_*) that make sense for a meter.
URL_SCHEMES = ("socket", "rfc2217", "loop", "spy", "alt", "hwgrep", "cp2110")
_NETWORK_SCHEMES = ("socket", "rfc2217")
PORT_HELP = (
    "give a device path such as /dev/ttyUSB0 (see 'fieldtool ports') or a URL such as "
    "socket://HOST:PORT, rfc2217://HOST:PORT or loop://"
)


def port_problem(name: str) -> str | None:
    """Why ``name`` cannot be a port to open, or None when it may be one (a device path that
    does not exist is found out by opening it)."""
    if not name.strip():
        return "nothing given"
    if len(name) > 4096 or any(ord(c) < 32 for c in name):
        return "too long, or with control characters, for a device path or URL"
    scheme, sep, _ = name.partition("://")
    if not sep:
        return None
    if scheme.lower() not in URL_SCHEMES:
        return f"{scheme}:// is not a kind of port address pyserial knows"
    if scheme.lower() in _NETWORK_SCHEMES:
        try:
            parts = urlsplit(name)
            port = parts.port
        except ValueError:
            parts, port = None, None
        if parts is None or not parts.hostname or not port:
            return f"it needs a host and a port number from 1 to 65535: {scheme}://HOST:PORT"
    return None


def open_port(name: str, baud: int = 9600, timeout: float = 2.0, terminator: bytes = b"\n"):
    """Open a device path or pyserial URL (``loop://``, ``socket://``, ``rfc2217://``); an
    address that cannot be a port is refused before anything is opened."""
    problem = port_problem(name)
    if problem:
        raise MeterSettingsError(f"port {shown(name)}: {problem}; {PORT_HELP}")
    with port_errors(name, opening=True):
        port = serial.serial_for_url(name, baudrate=baud, timeout=timeout, exclusive=True)
    return SerialTransport(port, terminator=terminator, name=name)
