"""Calibration against golden readings from ngspice (a general-purpose SPICE simulator).

The "real" board differs from its profile: its drive swing is a few per cent off and its
diodes have another saturation current. By the Shockley equation, V = n·Vt·ln(I/Is + 1)
(W. Shockley, Bell Syst. Tech. J. 28, 1949), scaling Is by k shifts every forward drop by
−n·Vt·ln k at any current, so the fit's common diode shift can represent it exactly. Golden
readings are ngspice's settled period averages with the meter on each node in turn
(``tests.ngspice_probe``). ``calibrate()`` must bring every residual within the meter's
accuracy at that reading and recover what the readings determine:

- Dickson pump (J. F. Dickson, IEEE J. Solid-State Circuits SC-11(3), 1976): the output is
  Vin − Vd + N·(Vφ − Vd) while each pump node averages Vin − Vd + (k−1)(Vφ − Vd) + Vφ/2, so
  drive swing and diode drop enter the readings in different combinations and both are
  recovered: the drive within 0.5 %, the diode shift within 10 mV.
- DC-fed ladder (charge balance, see REFERENCES: Vk = Vin + k(Vφ − 2Vd) − load terms): every
  stage adds Vφ − 2Vd, so DC readings fix only that combination. The fit must say so and
  recover the combination within 10 mV a stage.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.diagnosis.calibrate import calibrate
from tests.conftest import BASE, make_profile, needs_ngspice
from tests.ngspice_probe import metered_reading
from tests.readings import dc

IS = BASE["diode"]["saturation_current_a"]
VOLTS = BASE["drive"]["volts"]

CASES = {
    # name: (board sections, real drive factor, real Is factor)
    "dickson-drive-low-diodes-low": ({"board": {"topology": "dickson"}}, 0.96, 4.0),
    "dickson-drive-high-diodes-high": ({"board": {"topology": "dickson"}}, 1.03, 0.3),
    # a 100 kΩ meter on 47 nF: the meter pulls every node by several per cent
    "dickson-meter-pulls-hard": (
        {
            "board": {"topology": "dickson"},
            "capacitor": {"farads": 47e-9},
            "load": {"ohms": 100e3},
            "meter": {"input_ohms": 100e3},
        },
        0.96,
        4.0,
    ),
}


def _golden(profile, drive_factor, is_factor, tmp_path):
    """Settled ngspice readings of the real board at every probe node, meter on that node."""
    real = make_profile(
        **profile,
        drive={"volts": VOLTS * drive_factor},
        diode={"saturation_current_a": IS * is_factor},
    )
    circuit, params = build_circuit(real)
    nodes = [circuit.name(i) for i in circuit.probe_nodes]
    got = [metered_reading(circuit, params, n, real.meter_ohms, tmp_path) for n in nodes]
    return real, [dc(g.node, g.volts) for g in got]


def _accuracy(profile, volts):
    return abs(volts) * profile.meter_percent / 100 + profile.meter_volts


def _shift(profile, is_factor):
    """Forward-drop change when Is is multiplied by is_factor (Shockley equation)."""
    return -profile.diode.emission_coefficient * profile.thermal_volts * math.log(is_factor)


@needs_ngspice
@pytest.mark.parametrize("case", CASES, ids=list(CASES))
def test_calibrate_recovers_drive_and_diodes_from_ngspice(case, tmp_path):
    sections, drive_factor, is_factor = CASES[case]
    profile = make_profile(**sections)
    real, readings = _golden(sections, drive_factor, is_factor, tmp_path)

    result = calibrate(profile, readings)

    for r in readings:
        assert abs(result.residuals[r.at]) <= _accuracy(profile, r.value), (
            f"{r.at}: residual {result.residuals[r.at] * 1000:.1f} mV exceeds the meter "
            f"accuracy {_accuracy(profile, r.value) * 1000:.0f} mV"
        )
    assert result.notes == ()
    assert result.drive_scale == pytest.approx(drive_factor, abs=0.005)
    assert result.diode_shift_v == pytest.approx(_shift(real, is_factor), abs=0.010)
    assert result.supply_scale == pytest.approx(1.0, abs=0.005)  # S0 read: supply unchanged
    assert result.profile.drive_volts == pytest.approx(VOLTS * drive_factor, rel=0.005)


@needs_ngspice
def test_uncalibrated_profile_misses_the_golden_readings(tmp_path):
    """The check above can fail: the profile as written is off by many meter accuracies."""
    sections, drive_factor, is_factor = CASES["dickson-drive-low-diodes-low"]
    profile = make_profile(**sections)
    _, readings = _golden(sections, drive_factor, is_factor, tmp_path)
    e = expect(profile)
    worst = max(abs(e.node(r.at).volts - r.value) / _accuracy(profile, r.value) for r in readings)
    assert worst > 3.0


@needs_ngspice
def test_dc_ladder_fixes_only_drive_less_two_drops(tmp_path):
    drive_factor, is_factor = 0.96, 4.0
    profile = make_profile()
    real, readings = _golden({}, drive_factor, is_factor, tmp_path)
    result = calibrate(profile, readings)

    for r in readings:
        assert abs(result.residuals[r.at]) <= _accuracy(profile, r.value)
    assert result.notes and "drive swing less the diode drops" in result.notes[0]
    true_gain = VOLTS * drive_factor - 2 * _shift(real, is_factor)
    fitted_gain = result.profile.drive_volts - 2 * result.diode_shift_v
    assert fitted_gain == pytest.approx(true_gain, abs=0.010)
    assert np.isfinite(result.chi2)
