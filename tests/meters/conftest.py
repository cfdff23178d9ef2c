"""Shared by the simulated-meter tests: the demo board, its healthy expectation, the accuracy."""

import os

import pytest
import serial

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.profile import load_profile
from fieldtool.meters.transport import SerialTransport
from tests.conftest import ROOT

BOARD = ROOT / "fieldtool" / "profiles" / "tidegauge-apd-bias.toml"


@pytest.fixture(scope="module")
def board():
    return load_profile(BOARD)


@pytest.fixture(scope="module")
def healthy(board):
    return expect(board)


def accuracy(profile, volts: float) -> float:
    """The meter's accuracy bound at a reading, from the profile (percent plus volts)."""
    return profile.meter_percent / 100 * abs(volts) + profile.meter_volts


@pytest.fixture
def pty_pair():
    """A real pseudo-terminal: the master fd (the meter's side) and a pyserial transport on the
    slave (the tool's side)."""
    master, slave = os.openpty()
    port = serial.Serial(os.ttyname(slave), timeout=0.1)
    transport = SerialTransport(port, name="pty")
    yield master, transport
    transport.close()
    os.close(slave)
    try:
        os.close(master)
    except OSError:
        pass
