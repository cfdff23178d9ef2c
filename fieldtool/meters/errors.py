"""Errors raised while talking to a meter or reading what a technician typed.

FieldtoolError
└── MeterError             anything about meter input
    ├── PortMissing        the port does not exist (unplugged, wrong name)
    ├── PortPermission     the port exists but this user may not open it
    ├── PortBusy           another program holds the port
    ├── MeterDisconnected  the port went away in the middle of a reading
    ├── MeterTimeout       no complete line arrived in time
    ├── MeterGarbage       bytes arrived that are not a reading
    ├── ReadingParseError  a typed reading that cannot be understood
    ├── MeterSettingsError a meter settings file that cannot be used
    └── UnknownNode        the simulated probe was put on a node the board does not have
"""

from __future__ import annotations

import grp
import os
import sys

from fieldtool.core.errors import FieldtoolError


class MeterError(FieldtoolError):
    """Any problem getting a reading from a meter or from the keyboard."""

    title = "Meter error"


class PortMissing(MeterError):
    """The named serial port does not exist."""

    title = "Port missing"


class PortPermission(MeterError):
    """The serial port exists but cannot be opened by this user."""

    title = "Port permission denied"


class PortBusy(MeterError):
    """Another program has the serial port open or locked."""

    title = "Port busy"


class MeterDisconnected(MeterError):
    """The port vanished or failed while a reading was in progress."""

    title = "Meter disconnected"


class MeterTimeout(MeterError):
    """No complete line came from the meter before the timeout."""

    title = "Meter timeout"


class MeterGarbage(MeterError):
    """The meter sent bytes that do not parse as a reading."""

    title = "Meter sent garbage"


class ReadingParseError(MeterError):
    """A typed reading that is not a voltage or an overload."""

    title = "Cannot read value"


class MeterSettingsError(MeterError):
    """A meter settings file with an unknown key, wrong type or bad value."""

    title = "Bad meter settings"


class UnknownNode(MeterError):
    """A node name or test point that is not on the simulated board."""

    title = "Unknown node"


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
