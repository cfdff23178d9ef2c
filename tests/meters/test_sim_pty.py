"""The simulated meter served on a real pseudo-terminal, read with pyserial (no mocks).

The server runs in a thread with a pipe as its console; the meter reads fast here (short
measurement time and display lag) so the protocol tests stay quick. The full command, in a
subprocess with its normal timing, is tested in tests/cli/test_sim_meter_cli.py.
"""

from __future__ import annotations

import os
import queue
import threading
import tomllib

import pytest

from fieldtool.core.circuit.profile import profile_from_dict
from fieldtool.meters.errors import MeterTimeout
from fieldtool.meters.scpi import ScpiMeter
from fieldtool.meters.settings import MeterSettings, SettleRule
from fieldtool.meters.settle import settle
from fieldtool.meters.sim_pty import (
    ERROR_QUEUE_SIZE,
    PtyMeter,
    ScpiResponder,
    canonical_header,
    scpi_number,
    stream_text,
)
from fieldtool.meters.simulated import SimulatedMeter
from fieldtool.meters.stream import StreamMeter
from fieldtool.meters.transport import open_port
from tests.meters.conftest import BOARD, accuracy
from tests.readings import dc


class Served:
    """A PtyMeter serving in a thread; ``type`` a console line and wait for its echo."""

    def __init__(self, meter, protocol="scpi", command_gap_s=0.0):
        self.said: queue.Queue[str] = queue.Queue()
        self.log: list[str] = []
        self.server = PtyMeter(meter, protocol, say=self._say, command_gap_s=command_gap_s)
        self.console_r, self.console_w = os.pipe()
        self.thread = threading.Thread(target=self.server.serve, args=(self.console_r,))
        self.thread.daemon = True
        self.thread.start()

    def _say(self, text):
        self.log.append(text)
        self.said.put(text)

    def type(self, line, expect_prefix=None):
        os.write(self.console_w, (line + "\n").encode())
        if expect_prefix is None:
            return None
        while True:
            text = self.said.get(timeout=5)
            if text.startswith(expect_prefix):
                return text

    def stop(self):
        os.close(self.console_w)  # end of console input stops the server
        self.thread.join(timeout=5)
        assert not self.thread.is_alive()
        self.server.close()
        os.close(self.console_r)


def fast_meter(profile, expectation, seed=0):
    return SimulatedMeter(
        profile, seed=seed, reading_interval_s=0.02, meter_tau_s=0.01, expectation=expectation
    )


@pytest.fixture
def scpi(board, healthy):
    served = Served(fast_meter(board, healthy))
    yield served
    served.stop()


@pytest.fixture
def stream(board, healthy):
    served = Served(fast_meter(board, healthy), protocol="stream")
    yield served
    served.stop()


def test_scpi_dialogue_reads_the_expected_node(scpi, board, healthy):
    transport = open_port(scpi.server.port, timeout=2.0)
    try:
        meter = ScpiMeter(transport, MeterSettings(timeout_s=2))
        assert meter.connect() == "FIELDTOOL,SIMULATED-METER,tidegauge-apd-bias,0.1.0"
        assert scpi.type("TP5", "probe on") == "probe on S4 (TP5)"
        result = settle(meter.read, SettleRule())
        expected = healthy.node("S4").volts
        assert result.settled and abs(result.value - expected) <= accuracy(board, expected)
    finally:
        transport.close()


def ask(transport, command: str) -> str:
    transport.write(command.encode() + b"\n")
    return transport.readline(2.0).decode().strip()


def test_unknown_command_goes_to_the_error_queue(scpi):
    transport = open_port(scpi.server.port, timeout=2.0)
    try:
        transport.write(b"VOLT:RANG:AUTO ON\n")  # not a command this meter knows
        assert ask(transport, "SYST:ERR?") == '-113,"Undefined header"'
        assert ask(transport, "SYSTem:ERRor:NEXT?") == '0,"No error"'
        assert ask(transport, "*IDN?;*OPC?").endswith(",0.1.0;1")
        number = ask(transport, ":MEASure:VOLTage:DC?")
        assert number.startswith(("+", "-")) and "E" in number
        assert float(number) == pytest.approx(0.0, abs=0.1)  # probe lifted
    finally:
        transport.close()


def test_endless_line_is_an_input_overrun_not_a_hang(scpi):
    transport = open_port(scpi.server.port, timeout=2.0)
    try:
        transport.write(b"\x00\xff" * 1500)  # more than the meter can hold in one line
        transport.write(b"\n")
        assert ask(transport, "SYST:ERR?") == '-363,"Input buffer overrun"'
        assert ask(transport, "*OPC?") == "1"
        assert ask(transport, "SYST:ERR?") == '0,"No error"'  # reported once
    finally:
        transport.close()


def test_stream_lines_and_a_lifted_probe(stream, board, healthy):
    transport = open_port(stream.server.port, timeout=2.0)
    try:
        meter = StreamMeter(transport, MeterSettings(protocol="stream", timeout_s=2))
        stream.type("S8", "probe on")
        result = settle(meter.read, SettleRule())
        expected = healthy.node("S8").volts
        assert result.settled and abs(result.value - expected) <= accuracy(board, expected)
        assert stream.type("lift", "probe") == "probe lifted"
        result = settle(meter.read, SettleRule())
        assert abs(result.value) < accuracy(board, 0.0)
        assert abs(meter.read().value) < 0.1  # a lifted probe reads millivolts of noise
    finally:
        transport.close()


def ranged_board(volts):
    data = tomllib.loads(BOARD.read_text())
    data["meter"]["range_volts"] = volts
    return profile_from_dict(data, "ranged.toml")


@pytest.mark.parametrize("protocol", ["scpi", "stream"])
def test_over_range_node_reads_overload_never_a_number(protocol, healthy):
    served = Served(fast_meter(ranged_board(100.0), healthy), protocol=protocol)
    transport = open_port(served.server.port, timeout=2.0)
    try:
        cls = ScpiMeter if protocol == "scpi" else StreamMeter
        meter = cls(transport, MeterSettings(protocol=protocol, timeout_s=2))
        meter.connect()
        served.type("HV-OUT", "probe on")
        result = settle(meter.read, SettleRule())
        assert (result.overload, result.value, result.settled) == (True, None, True)
    finally:
        transport.close()
        served.stop()


def test_slow_meter_loses_fast_commands_and_command_delay_fixes_it(board, healthy):
    served = Served(fast_meter(board, healthy), command_gap_s=0.3)
    try:
        transport = open_port(served.server.port, timeout=0.5)
        hasty = ScpiMeter(transport, MeterSettings(timeout_s=0.5))
        # *IDN? is answered; *CLS, CONF:VOLT:DC and SYST:ERR? right behind it are lost, so
        # the error check never hears back
        with pytest.raises(MeterTimeout):
            hasty.connect()
        transport.close()
        assert any(line.startswith("lost command 'CONF:VOLT:DC'") for line in served.log)

        transport = open_port(served.server.port, timeout=2.0)
        patient = ScpiMeter(transport, MeterSettings(timeout_s=2, command_delay_s=0.35))
        assert patient.connect().startswith("FIELDTOOL,")
        assert patient.read().value == pytest.approx(0.0, abs=0.1)
        transport.close()
    finally:
        served.stop()


def test_console_words(scpi):
    assert scpi.type("S99", "no node").startswith(
        "no node, test point, rail or diode 'S99' on this board"
    )
    assert scpi.type("nodes", "nodes:").startswith("nodes: S0 (TP1), P1, S1")
    assert scpi.type("s2", "probe") == "probe on S2 (TP3)"
    assert scpi.type("", "probe") == "probe on S2 (TP3)"
    assert scpi.type("off", "probe") == "probe lifted"


def test_quit_stops_the_server(board, healthy):
    served = Served(fast_meter(board, healthy))
    served.type("quit")
    served.thread.join(timeout=5)
    assert not served.thread.is_alive()
    served.server.close()
    os.close(served.console_w)
    os.close(served.console_r)


@pytest.mark.parametrize(
    ("command", "header"),
    [
        ("*IDN?", "*IDN?"),
        ("*idn?", "*IDN?"),
        ("READ?", "READ?"),
        (":MEASure:VOLTage:DC? AUTO,DEF", "MEAS:VOLT:DC?"),
        ("MEAS:VOLT?", "MEAS:VOLT:DC?"),
        ("CONFigure:VOLTage:DC 100,0.001", "CONF:VOLT:DC"),
        ("CONF:VOLT", "CONF:VOLT:DC"),
        ("SYSTEM:ERROR?", "SYST:ERR?"),
        ("SYST:ERR:NEXT?", "SYST:ERR?"),
        ("VOLT:RANG:AUTO ON", "VOLT:RANG:AUTO"),
        ("   ", ""),
    ],
)
def test_canonical_header(command, header):
    assert canonical_header(command) == header


class Fixed:
    """Stands in for the meter behind the responder: a fixed reading and identity."""

    identity = "ACME,SIM,0,1"

    def __init__(self, volts):
        self.volts = volts

    def read(self):
        return dc(None, self.volts)


def test_responder_error_queue_fetch_and_reset():
    r = ScpiResponder(Fixed(12.5))
    assert r.handle("FETC?") is None  # nothing measured yet
    assert r.handle("SYST:ERR?") == '-230,"Data corrupt or stale"'
    assert r.handle("INIT") is None
    assert r.handle("FETC?") == "+1.25000000E+01"
    assert r.handle("*RST;FETC?") is None
    r.handle("*CLS")
    for _ in range(ERROR_QUEUE_SIZE + 5):
        r.handle("BOGUS")
    answers = [r.handle("SYST:ERR?") for _ in range(ERROR_QUEUE_SIZE + 1)]
    assert answers[: ERROR_QUEUE_SIZE - 1] == ['-113,"Undefined header"'] * (ERROR_QUEUE_SIZE - 1)
    assert answers[ERROR_QUEUE_SIZE - 1 :] == ['-350,"Queue overflow"', '0,"No error"']
    r.handle("BOGUS")
    r.handle("*CLS")
    assert r.handle("SYST:ERR?") == '0,"No error"'


@pytest.mark.parametrize(
    ("reading", "nr3", "line"),
    [
        (dc(None, 125.7718), "+1.25771800E+02", "125.77 V"),
        (dc(None, -68.04), "-6.80400000E+01", "-68.040 V"),
        (dc(None, 3.3), "+3.30000000E+00", "3.3000 V"),
        (dc(None, 0.0123), "+1.23000000E-02", "12.300 mV"),
        (dc(None, -0.0009), "-9.00000000E-04", "-0.9000 mV"),
        (dc(None, None), "+9.90000000E+37", "OL"),
    ],
)
def test_number_and_line_formats(reading, nr3, line):
    assert scpi_number(reading) == nr3
    assert stream_text(reading) == line
