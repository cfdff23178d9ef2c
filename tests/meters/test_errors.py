"""Foreign errors become the tool's own in one place, by type and errno, grouped by what the
caller can do next. The errors come from real calls where one can be made to fail here (a
missing device, a locked port, a refused connection, an unknown URL scheme, a hung-up pty);
errno values the machine cannot produce on demand are built as the OS would raise them."""

from __future__ import annotations

import errno
import os
import socket
import termios

import pytest
import serial

from fieldtool.meters import errors as e
from fieldtool.meters.transport import open_port


@pytest.mark.parametrize(
    ("cls", "group"),
    [
        (e.MeterTimeout, e.MeterTransientError),
        (e.ReadingParseError, e.MeterTransientError),
        (e.PortMissing, e.MeterConnectionError),
        (e.PortBusy, e.MeterConnectionError),
        (e.MeterDisconnected, e.MeterConnectionError),
        (e.PortPermission, e.MeterSetupError),
        (e.MeterGarbage, e.MeterSetupError),
        (e.MeterSettingsError, e.MeterSetupError),
        (e.UnknownNode, e.MeterSetupError),
    ],
)
def test_each_error_sits_in_one_group(cls, group):
    groups = (e.MeterTransientError, e.MeterConnectionError, e.MeterSetupError)
    assert [g for g in groups if issubclass(cls, g)] == [group]
    assert issubclass(cls, e.MeterError) and cls.__name__ in e.__doc__  # drawn in the tree


@pytest.mark.parametrize(
    ("code", "cls"),
    [
        (errno.ENOENT, e.PortMissing),
        (errno.ENODEV, e.PortMissing),
        (errno.ENXIO, e.PortMissing),
        (errno.EACCES, e.PortPermission),
        (errno.EPERM, e.PortPermission),
        (errno.EBUSY, e.PortBusy),
        (errno.EWOULDBLOCK, e.PortBusy),
        (errno.ECONNREFUSED, e.PortMissing),
        (errno.EHOSTUNREACH, e.PortMissing),
        (errno.EIO, e.PortMissing),
    ],
)
def test_opening_errors_by_errno(code, cls):
    # pyserial raises SerialException(errno, text) from inside ``except OSError``; only the
    # number decides, so a message in another language changes nothing.
    raised = serial.SerialException(code, "message text in any language")
    assert type(e.port_error("/dev/ttyUSB0", raised, opening=True)) is cls


def test_the_errno_can_sit_on_the_error_pyserial_raised_from():
    def open_as_pyserial_does() -> None:  # urlhandler/protocol_socket.py, Serial.open
        try:
            raise ConnectionRefusedError(errno.ECONNREFUSED, "Connection refused")
        except OSError as msg:
            raise serial.SerialException(f"Could not open port socket://h:1: {msg}")  # noqa: B904

    with pytest.raises(serial.SerialException) as info:
        open_as_pyserial_does()
    assert info.value.errno is None and e.os_errno(info.value) == errno.ECONNREFUSED


@pytest.mark.parametrize(
    "exc",
    [
        termios.error(errno.EIO, "Input/output error"),
        OSError(errno.EIO, "Input/output error"),
        serial.SerialException("device reports readiness to read but returned no data"),
    ],
)
def test_anything_in_use_is_a_disconnect(exc):
    error = e.port_error("pty", exc, opening=False)
    assert type(error) is e.MeterDisconnected and "check the cable" in error.message


def test_termios_errno_is_read_from_its_arguments():
    assert e.os_errno(termios.error(errno.EIO, "Input/output error")) == errno.EIO


def test_real_missing_device(tmp_path):
    with pytest.raises(e.PortMissing, match="does not exist"):
        open_port(str(tmp_path / "ttyUSB7"))


def test_real_refused_connection():
    with socket.socket() as s:  # a port nobody listens on: bound, never accepting
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    with pytest.raises(e.PortMissing, match="check the name or address"):
        open_port(f"socket://127.0.0.1:{port}", timeout=0.5)


def test_real_unknown_url_scheme_is_a_setting_to_fix():
    with pytest.raises(e.MeterSettingsError, match="serial-over-pigeon:// is not a kind of port"):
        open_port("serial-over-pigeon://coop")


def test_real_locked_port_is_busy():
    master, slave = os.openpty()
    name = os.ttyname(slave)
    first = open_port(name)
    try:
        with pytest.raises(e.PortBusy):
            open_port(name)
    finally:
        first.close()
        os.close(slave)
        os.close(master)
