"""A serial line that hangs up mid-dialogue is a MeterDisconnected, whichever call meets it."""

import os
import threading

from fieldtool.core.errors import FieldtoolError
from fieldtool.meters.errors import MeterDisconnected
from fieldtool.meters.scpi import ScpiMeter
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.transport import open_port
from tests.pty_lines import pty_lines


def _meter_that_hangs_up(fd: int, hang_up: threading.Event) -> None:
    """Answer *IDN?, SYST:ERR? and READ? until told to hang up, then close on the next
    request."""
    for line in pty_lines(fd):
        if hang_up.is_set():
            os.close(fd)
            return
        reply = {"*IDN?": "ACME,DMM,1,1", "SYST:ERR?": '0,"No error"', "READ?": "+1.25E+01"}
        reply = reply.get(line)
        if reply:
            os.write(fd, (reply + "\n").encode())


def test_hang_up_is_disconnected_every_time():
    """Over real pty pairs: the first failure after the far end closes is MeterDisconnected,
    never a termios or OS error escaping (tcdrain on a hung-up line raises termios.error)."""
    seen = set()
    for _ in range(15):
        master, slave = os.openpty()
        hang_up = threading.Event()
        threading.Thread(target=_meter_that_hangs_up, args=(master, hang_up), daemon=True).start()
        settings = MeterSettings(timeout_s=0.5)
        transport = open_port(os.ttyname(slave), settings.baud, settings.timeout_s)
        meter = ScpiMeter(transport, settings)
        try:
            meter.connect()
            assert meter.read().value == 12.5
            hang_up.set()
            errors = []
            for _ in range(4):
                try:
                    meter.read()
                except FieldtoolError as exc:
                    errors.append(type(exc))
                    if isinstance(exc, MeterDisconnected):
                        break
            assert errors and errors[-1] is MeterDisconnected, errors
            seen.add(tuple(errors))
        finally:
            transport.close()
            os.close(slave)
    assert seen
