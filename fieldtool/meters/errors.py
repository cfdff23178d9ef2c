"""Errors met while getting a reading, grouped by what the caller can do next.

FieldtoolError
└── MeterError                  anything about getting a reading
    ├── MeterTransientError     try again: the next reading may well work
    │   ├── MeterTimeout        no complete line arrived in time
    │   ├── WrongMode           the meter is in a mode no kind is read in (AC current)
    │   └── ReadingParseError   a typed reading that cannot be understood: type it again
    ├── MeterConnectionError    reconnect: plug the meter in or free its port, then connect
    │   ├── PortMissing         the port does not exist (unplugged, wrong name or address)
    │   ├── PortBusy            another program holds the port
    │   └── MeterDisconnected   the port went away in the middle of a reading
    └── MeterSetupError         fix the settings (or the access rights), then connect again
        ├── PortPermission      the port exists but this user may not open it
        ├── MeterGarbage        bytes arrived that are not a reading (baud, terminator, regex)
        ├── MeterSettingsError  a meter settings file or option that cannot be used
        └── UnknownNode         the simulated probe was put on a node the board does not have

Foreign errors (pyserial's ``SerialException``, ``OSError``, ``termios.error``, a
``ValueError`` for a URL pyserial does not know) become these in one place, ``port_error``,
by their type and errno, never by their message text.
"""

from __future__ import annotations

import errno
import grp
import os
import socket
import sys
import termios
from collections.abc import Iterator
from contextlib import contextmanager

import serial

from fieldtool.core.errors import FieldtoolError


class MeterError(FieldtoolError):
    """Any problem getting a reading from a meter or from the keyboard."""

    title = "Meter error"


class MeterTransientError(MeterError):
    """A reading that failed this time; asking again may well work."""

    title = "Reading failed"


class MeterConnectionError(MeterError):
    """The meter cannot be reached; connect again once it is plugged in or its port is free."""

    title = "Meter not connected"


class MeterSetupError(MeterError):
    """The meter is reached but set up wrongly; fix the settings, then connect again."""

    title = "Meter set up wrongly"


class MeterTimeout(MeterTransientError):
    """No complete line came from the meter before the timeout."""

    title = "Meter timeout"


class WrongMode(MeterTransientError):
    """The meter shows a mode no measurement kind is read in; turning its dial fixes it."""

    title = "Meter in another mode"


class ReadingParseError(MeterTransientError):
    """A typed reading that is not a value with a unit, or an overload."""

    title = "Cannot read value"


class PortMissing(MeterConnectionError):
    """The named serial port does not exist."""

    title = "Port missing"


class PortBusy(MeterConnectionError):
    """Another program has the serial port open or locked."""

    title = "Port busy"


class MeterDisconnected(MeterConnectionError):
    """The port vanished or failed while a reading was in progress."""

    title = "Meter disconnected"


class PortPermission(MeterSetupError):
    """The serial port exists but cannot be opened by this user."""

    title = "Port permission denied"


class MeterGarbage(MeterSetupError):
    """The meter sent bytes that do not parse as a reading."""

    title = "Meter sent garbage"


class MeterSettingsError(MeterSetupError):
    """A meter settings file with an unknown key, wrong type or bad value."""

    title = "Bad meter settings"


class UnknownNode(MeterSetupError):
    """A node name or test point that is not on the simulated board."""

    title = "Unknown node"


# What a port can raise: pyserial's own error, the OS error, and termios.error from
# tcdrain/tcflush on a line that hung up (EIO), which is neither of the others.
PORT_ERRORS = (serial.SerialException, OSError, termios.error)
_MISSING = {errno.ENOENT, errno.ENODEV, errno.ENXIO}
_DENIED = {errno.EACCES, errno.EPERM}
_BUSY = {errno.EBUSY, errno.EAGAIN, errno.EWOULDBLOCK}  # flock on a held port: EWOULDBLOCK
_UNREACHABLE = {errno.ECONNREFUSED, errno.EHOSTUNREACH, errno.ENETUNREACH, errno.ETIMEDOUT}


def _chain(exc: BaseException) -> Iterator[BaseException]:
    """The error and those it was raised from or during (pyserial raises inside ``except``)."""
    seen: set[int] = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        yield current
        current = current.__cause__ or current.__context__


def os_errno(exc: BaseException) -> int | None:
    """The errno behind a foreign error: an OSError's (SerialException is one), termios's
    first argument, or the first one found among the errors it was raised from."""
    for e in _chain(exc):
        if isinstance(e, termios.error) and e.args and isinstance(e.args[0], int):
            return e.args[0]
        if isinstance(e, OSError) and e.errno is not None:
            return e.errno
    return None


def port_error(name: str, exc: BaseException, *, opening: bool) -> MeterError:
    """The tool's error for a foreign error met while opening (or using) the port ``name``."""
    if not opening:
        return MeterDisconnected(
            f"{name} stopped answering mid-reading ({exc});"
            " check the cable and plug the meter back in"
        )
    if isinstance(exc, ValueError | KeyError):  # serial_for_url: a URL or option it refuses
        return MeterSettingsError(
            f"cannot open {name}: pyserial does not take that address or its options; give a "
            "device such as /dev/ttyUSB0 or a URL socket://HOST:PORT, rfc2217://HOST:PORT or "
            "loop://"
        )
    code = os_errno(exc)
    if code in _MISSING:
        return PortMissing(
            f"{name} does not exist; plug the meter in or list ports with 'fieldtool ports'"
        )
    if code in _DENIED:
        return PortPermission(permission_message(name))
    if code in _BUSY:
        return PortBusy(f"{name} is in use by another program; close it and try again")
    if code in _UNREACHABLE or any(isinstance(e, socket.gaierror) for e in _chain(exc)):
        return PortMissing(f"cannot open {name} ({exc}); check the name or address")
    return PortMissing(f"cannot open {name} ({exc}); check the name, address and cable")


@contextmanager
def port_errors(name: str, *, opening: bool = False) -> Iterator[None]:
    """Turn the foreign errors of a port operation into the tool's own (see ``port_error``)."""
    # Opening, pyserial also raises ValueError for a URL it cannot take, and KeyError for an
    # option it does not know (loop://?x=1).
    foreign = (*PORT_ERRORS, ValueError, KeyError) if opening else PORT_ERRORS
    try:
        yield
    except foreign as exc:
        raise port_error(name, exc, opening=opening) from None


def permission_message(port: str) -> str:
    """Explain why ``port`` cannot be opened and how to get access to it."""
    base = f"cannot open {port}: permission denied"
    try:
        st = os.stat(port)
    except OSError:
        return f"{base}; check that your user may read and write it"
    try:
        group = grp.getgrgid(st.st_gid).gr_name
    except KeyError:
        group = str(st.st_gid)
    if sys.platform.startswith("linux"):
        return (
            f"{base}; it belongs to group '{group}': run 'sudo usermod -aG {group} $USER',"
            " then log out and in again"
        )
    return f"{base}; it belongs to group '{group}': add your user to that group"
