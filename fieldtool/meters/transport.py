"""One small transport interface for meters, and the serial implementation of it."""

from __future__ import annotations

import errno
import termios
import time
from typing import Protocol
from urllib.parse import urlsplit

import serial

from fieldtool.core.errors import shown
from fieldtool.meters.errors import (
    MeterDisconnected,
    MeterTimeout,
    PortBusy,
    PortMissing,
    PortPermission,
    permission_message,
)

# What a port that has gone away raises: pyserial's own error, the OS error, and termios.error
# from tcdrain/tcflush on a line that hung up (EIO), which is neither of the others.
PORT_ERRORS = (serial.SerialException, OSError, termios.error)


class Transport(Protocol):
    """What a meter driver needs: write bytes, read a line, close."""

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
        self.name = name or str(getattr(port, "port", "") or "serial port")
        self._pending = b""

    def _disconnected(self, exc: BaseException) -> MeterDisconnected:
        return MeterDisconnected(
            f"{self.name} stopped answering mid-reading ({exc});"
            " check the cable and plug the meter back in"
        )

    def write(self, data: bytes) -> None:
        """Send bytes to the meter."""
        try:
            self.port.write(data)
            self.port.flush()
        except PORT_ERRORS as exc:
            raise self._disconnected(exc) from None

    def readline(self, timeout: float) -> bytes:
        """One complete line ending in the terminator; a partial line is a MeterTimeout."""
        deadline = time.monotonic() + timeout
        end = self.terminator[-1:]
        while True:
            cut = self._pending.find(end)
            if cut >= 0:
                line, self._pending = self._pending[: cut + 1], self._pending[cut + 1 :]
                return line
            left = deadline - time.monotonic()
            if left <= 0:
                partial, self._pending = self._pending, b""
                got = f"only a partial line {partial!r}" if partial else "nothing"
                raise MeterTimeout(
                    f"{self.name}: {got} within {timeout:g} s; check baud rate, terminator"
                    " and that the meter is in remote/output mode"
                )
            try:
                self.port.timeout = min(left, 0.05)
                waiting = getattr(self.port, "in_waiting", 0) or 1
                chunk = self.port.read(waiting)
            except PORT_ERRORS as exc:
                raise self._disconnected(exc) from None
            self._pending += chunk

    def discard_stale(self) -> None:
        """Throw away buffered input, ours and the driver's."""
        self._pending = b""
        try:
            self.port.reset_input_buffer()
        except PORT_ERRORS as exc:
            raise self._disconnected(exc) from None

    def close(self) -> None:
        """Close the port; closing twice is harmless."""
        try:
            self.port.close()
        except PORT_ERRORS:
            pass  # the port is already gone; nothing left to release


def translate_open_error(name: str, exc: BaseException) -> Exception:
    """The MeterError that explains why ``name`` could not be opened."""
    code = getattr(exc, "errno", None)
    text = str(exc).lower()
    name = name if len(name) <= 80 else shown(name)
    if code == errno.ENOENT or "no such file" in text or "filenotfound" in text:
        return PortMissing(
            f"{name} does not exist; plug the meter in or list ports with 'fieldtool ports'"
        )
    if code == errno.EACCES or "permission denied" in text:
        return PortPermission(permission_message(name))
    if code == errno.EBUSY or "busy" in text or "lock" in text:
        return PortBusy(f"{name} is in use by another program; close it and try again")
    if "connection refused" in text or "could not open port" in text:
        return PortMissing(f"cannot open {name} ({exc}); check the name or address")
    return MeterDisconnected(f"cannot use {name} ({exc})")


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
    scheme, sep, rest = name.partition("://")
    if not sep:
        return None
    if scheme.lower() not in URL_SCHEMES:
        return f"{scheme}:// is not a kind of port address pyserial knows"
    if scheme.lower() in _NETWORK_SCHEMES:
        try:
            parts = urlsplit(name)
            port = parts.port
        except ValueError:
            port = None
        if not parts.hostname or port is None or port == 0:
            return f"it needs a host and a port number from 1 to 65535: {scheme}://HOST:PORT"
    return None


def open_port(name: str, baud: int = 9600, timeout: float = 2.0, terminator: bytes = b"\n"):
    """Open a device path or pyserial URL (``loop://``, ``socket://``, ``rfc2217://``)."""
    problem = port_problem(name)
    if problem:
        raise PortMissing(f"port {shown(name)}: {problem}; {PORT_HELP}")
    try:
        try:
            port = serial.serial_for_url(name, baudrate=baud, timeout=timeout, exclusive=True)
        except ValueError:
            # URL handlers such as loop:// do not know 'exclusive'
            port = serial.serial_for_url(name, baudrate=baud, timeout=timeout)
    except (serial.SerialException, OSError) as exc:
        raise translate_open_error(name, exc) from None
    except (ValueError, KeyError):  # pyserial's URL option parsing (e.g. loop://?x=1)
        raise PortMissing(
            f"port {shown(name)}: URL options pyserial does not take; {PORT_HELP}"
        ) from None
    return SerialTransport(port, terminator=terminator, name=name)
