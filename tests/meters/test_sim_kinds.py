"""The simulated meter plays every kind of reading, in-process and over a real pseudo-terminal.

The reference for every value is the core: ``board_readouts(profile, fault)`` (ripple on a
scope, AC RMS, the supply lead and the drive rail through the burden, DC under a test load,
the power-off diode test), itself checked against ngspice with the instrument built into the
SPICE text in tests/core. Tolerances are the instrument's own stated accuracy from the
profile's ``[meter]`` and ``[scope]`` (``accuracy_sigma``, a 1σ of a rectangular bound).
"""

from __future__ import annotations

import math

import pytest

from fieldtool.core.circuit.readouts import accuracy_sigma, board_readouts
from fieldtool.core.circuit.readouts.spread import RECT
from fieldtool.core.diagnosis.faults import parse_fault
from fieldtool.core.measurement import AC_RMS, CURRENT, DC, DC_LOADED, DIODE_TEST, RIPPLE_PP
from fieldtool.meters.errors import MeterSettingsError
from fieldtool.meters.scpi import ScpiMeter
from fieldtool.meters.settings import MeterSettings, SettleRule
from fieldtool.meters.settle import settle
from fieldtool.meters.simulated import METER_TAU_S, SimulatedMeter
from fieldtool.meters.stream import StreamMeter
from fieldtool.meters.transport import open_port
from tests.meters.test_sim_pty import Served
from tests.meters.test_simulated import FakeClock

LOAD_OHMS = 47e3  # one of the demo board's [test_loads]


def bound(profile, kind: str, value: float) -> float:
    """The instrument's stated accuracy bound (rectangular half-width) at ``value``."""
    return float(accuracy_sigma(profile, kind, value)) * RECT


@pytest.fixture(scope="module")
def readouts(board):
    return board_readouts(board, spreads=False)


@pytest.fixture(scope="module")
def shorted_readouts(board):
    return board_readouts(board, fault=parse_fault("D5:short=0.316", board), spreads=False)


def settled_meter(board, readouts, fault=None, fault_readouts=None, **kw):
    clock = FakeClock()
    meter = SimulatedMeter(
        board,
        fault,
        seed=3,
        clock=clock,
        sleep=clock.sleep,
        readouts=fault_readouts if fault is not None else readouts,
        **kw,
    )
    return meter, clock


def read_after(meter, clock, seconds=20 * METER_TAU_S):
    clock.sleep(seconds)
    return meter.read()


@pytest.mark.parametrize("node", ["P1", "S2", "S8"])
def test_ac_volts_and_ripple_are_the_cores(board, readouts, node):
    meter, clock = settled_meter(board, readouts)
    meter.place_probe(node)
    j = readouts.powered.nodes.index(node)
    for kind, truth, name in (
        (AC_RMS, readouts.powered.ac_rms[0, j], "ac-rms"),
        (RIPPLE_PP, readouts.powered.ripple_pp[0, j], "ripple-pp"),
    ):
        meter.set_quantity(kind)
        sample = read_after(meter, clock)
        assert sample.quantity == kind and sample.unit == "V"
        assert abs(sample.value - truth) <= bound(board, name, truth)


def test_current_in_the_supply_lead_and_the_drive_rail(board, readouts):
    meter, clock = settled_meter(board, readouts)
    assert meter.rails == ("supply", "drive")
    meter.set_quantity(CURRENT)
    for rail, truth in (
        ("supply", readouts.powered.supply_amps[0]),
        ("drive", readouts.powered.rail_amps[0]),
    ):
        meter.place_probe(rail)
        sample = read_after(meter, clock)
        assert sample.unit == "A" and abs(sample.value - truth) <= bound(board, "current", truth)
    meter.place_probe("S4")  # the meter in series with nothing: no current
    assert abs(read_after(meter, clock).value) <= bound(board, "current", 0.0)


def test_dc_under_the_test_load_is_lower_and_carries_the_load(board, readouts):
    meter, clock = settled_meter(board, readouts)
    meter.place_probe("S8")
    unloaded = read_after(meter, clock).value
    meter.set_board(True, LOAD_OHMS)
    meter.set_quantity(DC_LOADED, (("test_load_ohms", LOAD_OHMS),))
    sample = read_after(meter, clock)
    i = readouts.powered.test_load_ohms.index(LOAD_OHMS)
    j = readouts.powered.nodes.index("S8")
    truth = readouts.powered.dc_loaded[0, i, j]
    assert sample.quantity == DC_LOADED and sample.condition("test_load_ohms") == LOAD_OHMS
    assert abs(sample.value - truth) <= bound(board, "dc", truth)
    assert sample.value < unloaded - 10 * bound(board, "dc", unloaded)  # the load shows


def test_a_test_load_not_in_the_profile_is_solved_on_demand(board, readouts):
    meter, clock = settled_meter(board, readouts)
    meter.place_probe("S8")
    meter.set_board(True, 22e3)
    loaded_22k = read_after(meter, clock).value
    meter.set_board(True, LOAD_OHMS)
    loaded_47k = read_after(meter, clock).value
    assert loaded_22k < loaded_47k  # a heavier load pulls the output further down


def test_power_off_discharged_then_diode_test(board, readouts, shorted_readouts):
    meter, clock = settled_meter(board, readouts)
    meter.place_probe("S8")
    assert read_after(meter, clock).value > 100
    meter.set_board(False)
    assert abs(read_after(meter, clock).value) <= bound(board, "dc", 0.0)  # discharged
    meter.set_quantity(DIODE_TEST)
    meter.place_probe("d5")
    truth = readouts.diodes.volts[0, 4, 0]
    # the reading climbs as the capacitors around the part charge: within the accuracy at
    # the core's settle time
    settle_s = readouts.diodes.settle_s[0, 4, 0]
    sample = read_after(meter, clock, 10 * METER_TAU_S + 3 * settle_s)
    assert sample.quantity == DIODE_TEST
    assert abs(sample.value - truth) <= bound(board, "diode-test", truth)
    meter.place_probe(None)  # open leads show OL
    assert read_after(meter, clock).overload
    faulty, fclock = settled_meter(
        board, readouts, fault="D5:short=0.316", fault_readouts=shorted_readouts
    )
    faulty.set_board(False)
    faulty.set_quantity(DIODE_TEST)
    faulty.place_probe("D5")
    low = read_after(faulty, fclock, 5.0).value
    assert low == pytest.approx(shorted_readouts.diodes.volts[0, 4, 0], abs=0.01)
    assert low < truth / 10  # a shorted diode reads near zero (common practice, no source)


def test_a_diode_test_on_a_powered_board_shows_ol(board, readouts):
    meter, clock = settled_meter(board, readouts)
    meter.set_quantity(DIODE_TEST)
    meter.place_probe("D5")
    assert read_after(meter, clock).overload


def test_changing_the_kind_resettles_from_where_the_display_stood(board, readouts):
    # the display lags with the meter's own τ after the dial turns (first order, as for a
    # probe move: Horowitz & Hill, The Art of Electronics, 3rd ed., §1.4.2; from memory)
    meter, clock = settled_meter(board, readouts, noise_fraction=0.0)
    meter.place_probe("P1")
    clock.sleep(20 * METER_TAU_S)
    dc = meter.display_volts()
    meter.set_quantity(AC_RMS)
    clock.sleep(METER_TAU_S)
    ac = readouts.powered.ac_rms[0, readouts.powered.nodes.index("P1")]
    assert meter.display_volts() == pytest.approx(ac + (dc - ac) * math.exp(-1), rel=1e-3)


def test_the_settings_of_a_kind_must_be_its_own(board, readouts):
    meter, _ = settled_meter(board, readouts)
    with pytest.raises(MeterSettingsError, match="needs the settings test_load_ohms, not none"):
        meter.set_quantity(DC_LOADED)
    with pytest.raises(MeterSettingsError, match="needs the settings none, not test_load_ohms"):
        meter.set_quantity(AC_RMS, (("test_load_ohms", 1e3),))
    assert meter.quantity == DC


# -- over the pseudo-terminal ---------------------------------------------------------------


def fast(board, readouts):
    return SimulatedMeter(
        board, seed=5, reading_interval_s=0.02, meter_tau_s=0.01, readouts=readouts
    )


def test_scpi_sets_up_each_kind_on_the_simulated_meter(board, readouts):
    served = Served(fast(board, readouts))
    transport = open_port(served.server.port, timeout=2.0)
    try:
        meter = ScpiMeter(transport, MeterSettings(timeout_s=2))
        meter.connect()
        assert meter.quantities == {"dc", "dc-loaded", "ac-rms", "current", "diode-test"}
        assert served.type("P1", "probe on") == "probe on P1"
        meter.set_quantity(AC_RMS)
        sample = settle(meter.read, SettleRule())
        truth = readouts.powered.ac_rms[0, readouts.powered.nodes.index("P1")]
        assert sample.quantity == AC_RMS and abs(sample.value - truth) <= bound(
            board, "ac-rms", truth
        )
        served.type("supply", "probe on")
        meter.set_quantity(CURRENT)
        sample = settle(meter.read, SettleRule())
        truth = readouts.powered.supply_amps[0]
        assert abs(sample.value - truth) <= bound(board, "current", truth)
        assert (
            served.type("power off", "meter on") == "meter on DC current, board off and discharged"
        )
        served.type("D3", "probe on")
        meter.set_quantity(DIODE_TEST)
        sample = settle(meter.read, SettleRule(timeout_s=20))
        truth = readouts.diodes.volts[0, 2, 0]
        assert sample.settled and abs(sample.value - truth) <= bound(board, "diode-test", truth)
    finally:
        transport.close()
        served.stop()


def test_a_streaming_simulated_meter_says_its_kind_in_its_unit(board, readouts):
    served = Served(fast(board, readouts), protocol="stream")
    transport = open_port(served.server.port, timeout=2.0)
    try:
        meter = StreamMeter(transport, MeterSettings(protocol="stream", timeout_s=2))
        served.type("S2", "probe on")
        assert served.type("ac-rms", "meter on") == "meter on AC volts, board powered"
        sample = settle(meter.read, SettleRule())  # the tool asked for dc; the line says AC
        truth = readouts.powered.ac_rms[0, readouts.powered.nodes.index("S2")]
        assert sample.quantity == AC_RMS and abs(sample.value - truth) <= bound(
            board, "ac-rms", truth
        )
        served.type("drive", "probe on")
        served.type("current", "meter on")
        sample = settle(meter.read, SettleRule())
        truth = readouts.powered.rail_amps[0]
        assert sample.quantity == CURRENT and abs(sample.value - truth) <= bound(
            board, "current", truth
        )
        served.type("load 47k", "meter on")
        served.type("S8", "probe on")
        served.type("dc", "meter on")
        meter.set_quantity(DC_LOADED, (("test_load_ohms", LOAD_OHMS),))
        sample = settle(meter.read, SettleRule())
        i = readouts.powered.test_load_ohms.index(LOAD_OHMS)
        truth = readouts.powered.dc_loaded[0, i, readouts.powered.nodes.index("S8")]
        assert sample.quantity == DC_LOADED and abs(sample.value - truth) <= bound(
            board, "dc", truth
        )
        served.type("power off", "meter on")
        served.type("diode-test", "meter on")
        served.type("D5", "probe on")
        sample = settle(meter.read, SettleRule(timeout_s=20))
        assert sample.quantity == DIODE_TEST
        assert sample.value == pytest.approx(readouts.diodes.volts[0, 4, 0], abs=0.02)
    finally:
        transport.close()
        served.stop()


def test_console_clips_a_load_and_refuses_nonsense(board, readouts):
    served = Served(fast(board, readouts))
    try:
        assert served.type("load 0", "a test load") == (
            "a test load needs a resistance above 0; type e.g. 'load 47k'"
        )
        assert served.type("load lots", "'lots'") == (
            "'lots' is not a resistance; type e.g. 'load 47k' or 'load off'"
        )
        assert served.type("load 47k", "meter on") == (
            "meter on DC volts, board powered, test load 47000 Ω clipped on"
        )
        assert served.type("load off", "meter on") == "meter on DC volts, board powered"
    finally:
        served.stop()


def test_ripple_and_ac_volts_of_noise_are_never_negative(board, readouts):
    # S0 sits on the supply: its ripple (tens of µV) is below the scope's noise; a peak-to-peak
    # or RMS reading is a magnitude all the same
    meter, clock = settled_meter(board, readouts, noise_fraction=1.0)
    meter.place_probe("S0")
    for kind in (RIPPLE_PP, AC_RMS):
        meter.set_quantity(kind)
        clock.sleep(20 * METER_TAU_S)
        assert all(meter.read().value >= 0 for _ in range(50))
