"""A SCPI meter set up for each kind, over a real pseudo-terminal pair (no mocks).

The far end is a scripted SCPI peer with an error queue, as IEEE 488.2 / SCPI 1999.0 describe
it (``SYST:ERR?`` answers the oldest entry, ``0,"No error"`` when empty; an unknown header
queues ``-113,"Undefined header"``; ``*CLS`` empties it): it knows the functions it is given
and reads a value per function.
"""

from __future__ import annotations

import os
import threading

import pytest
import serial

from fieldtool.core.measurement import AC_RMS, CURRENT, DC, DC_LOADED, DIODE_TEST, RIPPLE_PP
from fieldtool.meters.errors import MeterGarbage, MeterSettingsError
from fieldtool.meters.loop import MeterListener, MeterLoop
from fieldtool.meters.scpi import ScpiMeter, scpi_error_code
from fieldtool.meters.settings import MeterSettings, parse_settings
from fieldtool.meters.transport import SerialTransport
from tests.pty_lines import pty_lines

NO_ERROR = '+0,"No error"'
UNDEFINED = '-113,"Undefined header"'
VALUES = {
    "CONF:VOLT:DC": "+1.25771800E+02",
    "CONF:VOLT:AC": "+6.98500000E+00",
    "CONF:CURR:DC": "+2.80400000E-04",
    "CONF:DIOD": "+5.80800000E-01",
}


class ScriptedScpi:
    """A SCPI meter on the master side of a pty: the functions it knows set what READ?
    answers; anything else goes to its error queue."""

    def __init__(self, fd: int, functions: dict[str, str], error_answer: str | None = None):
        self.fd = fd
        self.functions = functions
        self.error_answer = error_answer  # a meter that answers SYST:ERR? oddly
        self.heard: list[str] = []
        self.errors: list[str] = []
        self.function = "CONF:VOLT:DC"
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _answer(self, command: str) -> str | None:
        if command == "*IDN?":
            return "ACME,DMM-5,77,3.1"
        if command == "*CLS":
            self.errors.clear()
            return None
        if command == "SYST:ERR?":
            if self.error_answer is not None:
                return self.error_answer
            return self.errors.pop(0) if self.errors else NO_ERROR
        if command == "READ?":
            return self.functions[self.function]
        if command in self.functions:
            self.function = command
            return None
        self.errors.append(UNDEFINED)
        return None

    def _serve(self) -> None:
        for command in pty_lines(self.fd):
            self.heard.append(command)
            reply = self._answer(command)
            if reply is not None:
                try:
                    os.write(self.fd, (reply + "\n").encode())
                except OSError:
                    return


def test_each_kind_is_set_up_once_and_read_in_its_unit(pty_pair):
    master, transport = pty_pair
    peer = ScriptedScpi(master, dict(VALUES))
    meter = ScpiMeter(transport, MeterSettings(timeout_s=2))
    meter.connect()
    assert peer.heard == ["*IDN?", "*CLS", "CONF:VOLT:DC", "SYST:ERR?"]
    readings = {}
    for kind in (AC_RMS, CURRENT, DIODE_TEST, DC):
        meter.set_quantity(kind)
        readings[kind.name] = meter.read()
    assert {k: (r.quantity.name, r.value, r.unit) for k, r in readings.items()} == {
        "ac-rms": ("ac-rms", 6.985, "V"),
        "current": ("current", 2.804e-4, "A"),
        "diode-test": ("diode-test", 0.5808, "V"),
        "dc": ("dc", 125.7718, "V"),
    }
    heard = len(peer.heard)
    meter.set_quantity(DC_LOADED, (("test_load_ohms", 47e3),))  # same mode: nothing is sent
    loaded = meter.read()
    assert peer.heard[heard:] == ["READ?"]
    assert (loaded.quantity, loaded.condition("test_load_ohms")) == (DC_LOADED, 47e3)
    assert peer.heard[4:8] == ["CONF:VOLT:AC", "SYST:ERR?", "READ?", "CONF:CURR:DC"]


def test_a_refused_setup_names_the_meter_its_error_and_the_setting(pty_pair):
    master, transport = pty_pair
    functions = {k: v for k, v in VALUES.items() if k != "CONF:DIOD"}  # no diode test
    ScriptedScpi(master, functions)
    meter = ScpiMeter(transport, MeterSettings(timeout_s=2))
    meter.connect()
    with pytest.raises(MeterSettingsError) as info:
        meter.set_quantity(DIODE_TEST)
    assert info.value.message == (
        "ACME,DMM-5,77,3.1 refused 'CONF:DIOD' for diode test, board off "
        '(-113,"Undefined header"); give its own command in the meter settings '
        '([configure] diode-test = "..."), or "" if it has no such mode'
    )
    assert meter.quantity == DC and meter.read().value == pytest.approx(125.7718)


def test_the_settings_file_gives_a_meters_own_commands(pty_pair):
    master, transport = pty_pair
    peer = ScriptedScpi(master, {"CONF:VOLT:DC": "+1.0E+00", "SENS:FUNC DIOD": "+6.1E-01"})
    settings = parse_settings(
        '[configure]\ndiode-test = "SENS:FUNC DIOD"\nac-rms = ""\ncurrent = ""\n', "dmm.toml"
    )
    meter = ScpiMeter(transport, settings)
    assert meter.quantities == {"dc", "dc-loaded", "diode-test"}
    meter.connect()
    meter.set_quantity(DIODE_TEST)
    assert meter.read().value == pytest.approx(0.61)
    assert "SENS:FUNC DIOD" in peer.heard
    with pytest.raises(MeterSettingsError, match="cannot measure AC volts .* it reads dc, dc-lo"):
        meter.set_quantity(AC_RMS)
    with pytest.raises(MeterSettingsError, match="cannot measure ripple peak to peak"):
        meter.set_quantity(RIPPLE_PP)


def test_a_meter_without_an_error_queue(pty_pair):
    master, transport = pty_pair
    ScriptedScpi(master, dict(VALUES), error_answer="ERR")
    meter = ScpiMeter(transport, MeterSettings(timeout_s=2))
    with pytest.raises(MeterGarbage, match="set check_errors = false in the meter settings"):
        meter.connect()


def test_without_error_checks_only_the_setups_are_sent(pty_pair):
    master, transport = pty_pair
    peer = ScriptedScpi(master, dict(VALUES))
    meter = ScpiMeter(transport, MeterSettings(timeout_s=2, check_errors=False))
    meter.connect()
    meter.set_quantity(CURRENT)
    assert meter.read().value == pytest.approx(2.804e-4)
    assert peer.heard == ["*IDN?", "CONF:VOLT:DC", "CONF:CURR:DC", "READ?"]


@pytest.mark.parametrize(
    ("answer", "code"),
    [('0,"No error"', 0), ('+0,"No error"', 0), ('-113,"Undefined header"', -113), ("OK", None)],
)
def test_error_codes(answer, code):
    assert scpi_error_code(answer) == code


class Told(MeterListener):
    def __init__(self) -> None:
        self.refused_with: list[str] = []
        self.samples: list = []
        self.more = threading.Event()

    def refused(self, error) -> None:
        self.refused_with.append(error.message)

    def received(self, sample) -> None:
        self.samples.append(sample)
        if len(self.samples) >= 3:
            self.more.set()


def test_the_loop_reads_on_in_its_mode_when_a_kind_is_refused():
    master, slave = os.openpty()
    functions = {k: v for k, v in VALUES.items() if k != "CONF:CURR:DC"}
    ScriptedScpi(master, functions)
    told = Told()

    def open_meter():
        port = serial.Serial(os.ttyname(slave), timeout=0.1)
        return ScpiMeter(SerialTransport(port, name="pty"), MeterSettings(timeout_s=2))

    loop = MeterLoop(open_meter, told, pause_s=0.01)
    loop.set_quantity(CURRENT)
    thread = loop.start()
    try:
        assert told.more.wait(10)
    finally:
        loop.stop()
        thread.join(5)
        os.close(slave)
        os.close(master)
    assert len(told.refused_with) == 1 and "refused 'CONF:CURR:DC'" in told.refused_with[0]
    assert {s.quantity for s in told.samples} == {DC}
