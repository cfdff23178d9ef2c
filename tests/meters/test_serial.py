"""Meters over real pseudo-terminal pairs and pyserial's loop:// (no mocks)."""

import os
import threading
import time

import pytest

from fieldtool.core.measurement import DC, RIPPLE_PP, Source
from fieldtool.meters.connect import PROTOCOL_DRIVERS
from fieldtool.meters.errors import (
    MeterDisconnected,
    MeterGarbage,
    MeterSettingsError,
    MeterTimeout,
    PortMissing,
    permission_message,
)
from fieldtool.meters.scpi import ScpiMeter
from fieldtool.meters.settings import PROTOCOLS, MeterSettings
from fieldtool.meters.simulated import SimulatedMeter
from fieldtool.meters.stream import StreamMeter
from fieldtool.meters.transport import open_port
from tests.pty_lines import pty_lines


def play_scpi(fd, answers, log):
    """Answer SCPI queries on the master fd from a dict of command -> list of replies."""
    for line in pty_lines(fd):
        log.append(line)
        if line in answers and answers[line]:
            os.write(fd, answers[line].pop(0))


def _start(target, *args):
    t = threading.Thread(target=target, args=args, daemon=True)
    t.start()
    return t


def test_scpi_dialogue(pty_pair):
    master, transport = pty_pair
    log = []
    answers = {
        "*IDN?": [b"ACME,DMM-1,123,1.0\n"],
        "SYST:ERR?": [b'+0,"No error"\n'],
        "READ?": [b"+1.23456789E+01\n"],
    }
    _start(play_scpi, master, answers, log)
    meter = ScpiMeter(transport, MeterSettings(timeout_s=2))
    assert meter.connect() == "ACME,DMM-1,123,1.0"
    reading = meter.read()
    assert reading.value == 12.3456789 and reading.overload is False
    assert log == ["*IDN?", "*CLS", "CONF:VOLT:DC", "SYST:ERR?", "READ?"]


def test_scpi_overload(pty_pair):
    master, transport = pty_pair
    _start(play_scpi, master, {"READ?": [b"+9.9E37\r\n"]}, [])
    reading = ScpiMeter(transport, MeterSettings(timeout_s=2)).read()
    assert reading.value is None and reading.overload is True


def test_scpi_garbage_retried_once_then_raised(pty_pair):
    master, transport = pty_pair
    log = []
    _start(play_scpi, master, {"READ?": [b"\x7f\x1b#\n", b"ERR\n"]}, log)
    with pytest.raises(MeterGarbage, match="meter answered 'ERR', which is not an IEEE 488.2"):
        ScpiMeter(transport, MeterSettings(timeout_s=2)).read()
    assert log == ["READ?", "READ?"]


def test_scpi_garbage_then_good(pty_pair):
    master, transport = pty_pair
    _start(play_scpi, master, {"READ?": [b"#?\n", b"5.000\n"]}, [])
    assert ScpiMeter(transport, MeterSettings(timeout_s=2)).read().value == 5.0


def test_slow_meter_times_out(pty_pair):
    _, transport = pty_pair
    with pytest.raises(MeterTimeout, match=r"pty: nothing within 0.3 s"):
        ScpiMeter(transport, MeterSettings(timeout_s=0.3)).read()


def test_partial_line_is_timeout_not_number(pty_pair):
    master, transport = pty_pair
    os.write(master, b"12.34")
    with pytest.raises(MeterTimeout, match=r"only a partial line b'12.34' within 0.3 s"):
        transport.readline(0.3)


def test_far_end_closing_mid_read(pty_pair):
    master, transport = pty_pair

    def hang_up():
        time.sleep(0.2)
        os.close(master)

    _start(hang_up)
    with pytest.raises(MeterDisconnected, match="pty stopped answering mid-reading"):
        transport.readline(3)


def test_stream_skips_stale_and_garbage(pty_pair):
    master, transport = pty_pair
    os.write(master, b"1.00 V\n")  # stale: buffered before the read
    time.sleep(0.1)

    def play():
        time.sleep(0.2)
        os.write(master, b"HOLD\n--\n12.50 V DC\n")

    _start(play)
    reading = StreamMeter(transport, MeterSettings(protocol="stream", timeout_s=2)).read()
    assert reading.value == 12.5


def test_stream_too_much_garbage(pty_pair):
    master, transport = pty_pair
    _start(lambda: (time.sleep(0.2), os.write(master, b"HOLD\n" * 5)))
    meter = StreamMeter(transport, MeterSettings(protocol="stream", timeout_s=2), max_skipped=2)
    with pytest.raises(MeterGarbage, match=r"3 lines in a row did not match the stream regex"):
        meter.read()


def test_loop_url_round_trip():
    transport = open_port("loop://", timeout=0.5)
    transport.write(b"+4.70E+00\n")
    assert transport.readline(1) == b"+4.70E+00\n"
    transport.close()


def test_missing_port_message():
    with pytest.raises(PortMissing) as info:
        open_port("/dev/ttyNOPE99")
    assert info.value.message == (
        "/dev/ttyNOPE99 does not exist; plug the meter in or list ports with 'fieldtool ports'"
    )


def test_permission_message_names_group(tmp_path):
    import grp

    path = tmp_path / "ttyUSB0"
    path.write_text("")
    group = grp.getgrgid(os.stat(path).st_gid).gr_name
    assert permission_message(str(path)) == (
        f"cannot open {path}: permission denied; it belongs to group '{group}':"
        f" run 'sudo usermod -aG {group} $USER', then log out and in again"
    )


def test_busy_port_is_port_busy():
    from fieldtool.meters.errors import PortBusy

    master, slave = os.openpty()
    name = os.ttyname(slave)
    first = open_port(name)
    try:
        with pytest.raises(PortBusy) as info:
            open_port(name)
        assert info.value.message == (
            f"{name} is in use by another program; close it and try again"
        )
    finally:
        first.close()
        os.close(slave)
        os.close(master)


@pytest.mark.parametrize("line", [b"OL\r\n", b"  OL  V DC\n"])
def test_stream_overload_line_is_overload_never_a_number(pty_pair, line):
    master, transport = pty_pair
    _start(lambda: (time.sleep(0.2), os.write(master, line)))
    reading = StreamMeter(transport, MeterSettings(protocol="stream", timeout_s=2)).read()
    assert (reading.overload, reading.value) == (True, None)


def test_command_delay_spaces_out_scpi_commands():
    # loop:// echoes each command back, which serves as the answer to a query here; it has no
    # error queue to ask
    now = [0.0]
    waits = []

    def sleep(seconds):
        waits.append(round(seconds, 9))
        now[0] += seconds

    transport = open_port("loop://", timeout=0.5)
    meter = ScpiMeter(
        transport,
        MeterSettings(command_delay_s=0.2, check_errors=False),
        clock=lambda: now[0],
        sleep=sleep,
    )
    try:
        assert meter.connect() == "*IDN?"
        now[0] += 0.05  # the meter took 50 ms to answer before the next command
        with pytest.raises(MeterGarbage):
            meter.read()  # 'READ?' echoed back is not a number; it is asked twice
    finally:
        transport.close()
    # *IDN? goes at once; CONF:VOLT:DC waits 0.2 s; each READ? waits what is left of 0.2 s
    assert waits == [0.2, 0.15, 0.2]


def test_no_command_delay_by_default():
    waits = []
    transport = open_port("loop://", timeout=0.5)
    settings = MeterSettings(check_errors=False)
    meter = ScpiMeter(transport, settings, clock=lambda: 0.0, sleep=waits.append)
    try:
        meter.connect()
    finally:
        transport.close()
    assert waits == []


def test_capabilities_are_flags_with_defaults():
    """A serial meter's probe is in a person's hand: placing it does nothing (no byte is sent);
    it can be set to DC volts and refuses a kind it has no set-up for, naming itself."""
    transport = open_port("loop://", timeout=0.2)
    meter = ScpiMeter(transport, MeterSettings(check_errors=False))
    try:
        assert meter.places_probe is False and SimulatedMeter.places_probe is True
        meter.place_probe("S3")
        with pytest.raises(MeterTimeout):
            transport.readline(0.2)  # loop:// would echo anything written
        meter.set_quantity(DC)
        with pytest.raises(MeterSettingsError, match="scpi meter on loop:// cannot measure ripple"):
            meter.set_quantity(RIPPLE_PP)
        assert meter.quantity == DC and meter.source == Source("meter", "scpi meter on loop://")
    finally:
        meter.close()


def test_every_protocol_in_the_settings_has_a_driver():
    assert set(PROTOCOL_DRIVERS) == set(PROTOCOLS)
