"""Shared by the simulated-meter tests: the demo board, its healthy expectation, the accuracy."""

import pytest

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.profile import load_profile
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
