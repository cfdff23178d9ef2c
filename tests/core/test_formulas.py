"""The solver against published closed forms, textbook relations and rules of thumb."""

import math
from dataclasses import replace

import numpy as np
import pytest

from fieldtool.core.circuit.expect import expect, period_average
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.solver import steady_state, transient
from fieldtool.core.circuit.spec import DiodeSpec
from tests.conftest import make_profile

# A near-ideal diode: n·Vt ≈ 1.3 mV, so its drop is a few mV at the currents used here.
# A near-ideal diode for the closed forms (drop of a few millivolts): no real part has an
# emission coefficient of 0.05, so the profile loader refuses it and it is set after loading.
IDEAL_DIODE = DiodeSpec(saturation_current_a=1e-6, emission_coefficient=0.05, series_ohms=0.0)


def _ideal(profile):
    return replace(profile, diode=IDEAL_DIODE)


def test_dickson_closed_form():
    """Dickson 1976 (IEEE J. Solid-State Circuits SC-11(3)):
    Vout = Vin − Vd + N·[(C/(C+Cs))·Vφ − Vd − Iout/((C+Cs)·f)], fast edges, stray Cs per node."""
    n, vin, vphi, c, cs, f, iout = 4, 3.3, 3.3, 1e-9, 0.2e-9, 1e6, 200e-6
    p = make_profile(
        board={"topology": "dickson", "stages": n},
        supply={"volts": vin},
        drive={"volts": vphi, "frequency_hz": f, "source_ohms": 0.5, "edge_fraction": 0.005},
        capacitor={"farads": c, "stray_farads": cs, "esr_ohms": 0.0},
        load={"ohms": None, "amps": iout},
        overrides={f"C{n + 1}": {"farads": 1e-6}},
    )
    e = expect(_ideal(p))
    vd = 0.01  # near-ideal diode drop at these currents (n·Vt·ln(I/Is) ≈ 1.3 mV × 7)
    formula = vin - vd + n * ((c / (c + cs)) * vphi - vd - iout / ((c + cs) * f))
    assert e.output_volts == pytest.approx(formula, rel=0.01)
    # The stray term is real: without it the formula would be ~2 V higher than the solver.
    assert abs(e.output_volts - (vin + n * (vphi - iout / (c * f)))) > 1.0


def test_cockcroft_walton_ripple_and_drop():
    """Kuffel, Zaengl & Kuffel, High Voltage Engineering Fundamentals, 2nd ed. 2000, §2.2.2
    (from memory): ripple δV = (I/fC)·n(n+1)/2; peak drop ΔV0 = (I/fC)(2n³/3 + n²/2 − n/6),
    which overstates by up to ~8 % at small n; peak output 2n·Vmax − ΔV0."""
    n, vm, f, c, i = 3, 100.0, 50e3, 100e-9, 1e-3
    p = make_profile(
        board={"topology": "ac-ladder", "stages": n},
        supply=None,
        drive={"volts": vm, "frequency_hz": f, "source_ohms": 0.5},
        capacitor={"farads": c, "esr_ohms": 0.0},
        load={"ohms": None, "amps": i},
    )
    circuit, params = build_circuit(_ideal(p))
    ss = steady_state(circuit, params, steps_per_period=400)
    out = ss.period.v[0, :, circuit.output_node - 1]
    k = i / (f * c)
    ripple = out.max() - out.min()
    assert ripple == pytest.approx(k * n * (n + 1) / 2, rel=0.05)
    drop = 2 * n * vm - out.max()
    formula = k * (2 * n**3 / 3 + n**2 / 2 - n / 6)
    diodes = 2 * n * 0.012  # near-ideal diode drops
    assert 0.85 * formula <= drop - diodes <= 1.02 * formula


def test_rule_of_thumb_five_volt_ladder():
    """Common practice, no source: with a 5 V supply and drive and small-signal diodes near
    0.5 V, each stage adds about 5 − 2×0.5 = 4 V, so five stages land near 25 V at light load
    rather than the ideal 30 V."""
    p = make_profile(board={"stages": 5}, load={"ohms": 1e6})
    v = expect(p).output_volts
    assert 23.0 <= v <= 27.5


def test_rule_of_thumb_ripple_with_100uF():
    """Common practice, no source: 100 µF capacitors at a few mA give output ripple of the
    order of 0.1 V (for a slow, few-hundred-hertz oscillator such as a 555 timer)."""
    p = make_profile(
        board={"stages": 5},
        drive={"frequency_hz": 500.0},
        capacitor={"farads": 100e-6},
        load={"ohms": 8000.0},
    )
    e = expect(p)
    assert 1e-3 <= abs(e.output_volts) / 8000.0 <= 5e-3  # a few mA
    assert 0.02 <= e.output_ripple_vpp <= 0.5


def test_input_current_is_n_plus_one_times_output():
    """An ideal N-stage pump draws (N+1)·Iout in total from its rails (Tanzawa & Tanaka,
    IEEE JSSC 32(8), 1997; from memory): Iout from the supply, N·Iout from the drive rail."""
    n = 5
    p = make_profile(board={"stages": n}, load={"ohms": 20000.0})
    e = expect(p)
    i_out = e.output_volts / 20000.0
    assert e.supply_current_a == pytest.approx(i_out, rel=0.01)
    assert e.supply_current_a + e.drive_current_a == pytest.approx((n + 1) * i_out, rel=0.03)


def test_stored_energy_and_rc_discharge():
    """Textbook: energy ½CV²; RC discharge V(t) = V0·e^(−t/RC), so t = RC·ln(V0/Vsafe).
    One stage whose reservoir dwarfs the flying capacitor discharges as a single RC."""
    r, c_res = 100e3, 100e-6
    p = make_profile(
        board={"stages": 1, "safe_volts": 3.0},
        load={"ohms": r},
        overrides={"C1": {"farads": 1e-9}, "C2": {"farads": c_res}},
    )
    e = expect(p)
    v0 = e.output_volts
    assert e.energy_by_part["C2"] == pytest.approx(0.5 * c_res * v0**2, rel=0.002)
    rc = r * c_res * (1 / (1 + r / 1e10))  # the capacitor's own 10 GΩ leakage in parallel
    assert e.discharge_s == pytest.approx(rc * math.log(v0 / 3.0), rel=0.02)


def test_shooting_equals_long_transient():
    """Internal consistency: the shooting result equals a long plain transient within 1 mV."""
    p = make_profile(board={"stages": 2}, load={"ohms": 1000.0}, capacitor={"farads": 0.3e-6})
    circuit, params = build_circuit(p)
    ss = steady_state(circuit, params)
    periods = transient(circuit, params, np.zeros_like(ss.period.x_start), 200)
    assert np.abs(periods[-1].x_end - periods[-2].x_end).max() < 1e-6  # settled
    tr_avg = period_average(periods[-1])
    assert np.abs(tr_avg - period_average(ss.period)).max() < 1e-3


def test_startup_estimate_against_plain_transient():
    """Internal consistency: the start-up estimate (linearised period map) against a plain
    transient from all-discharged, within 35 % (the estimate treats the diodes as they conduct
    in steady state, while at start-up they conduct harder)."""
    p = make_profile(board={"stages": 2}, load={"ohms": 1000.0}, capacitor={"farads": 0.3e-6})
    circuit, params = build_circuit(p)
    e = expect(p)
    periods = transient(circuit, params, np.zeros((1, len(circuit.cap_refs))), 150)
    o = circuit.output_node - 1
    final = e.output_volts
    averages = [period_average(per)[0, o] for per in periods]
    reached = next(k for k, v in enumerate(averages) if v >= 0.9 * final)
    actual = (reached + 1) * circuit.period_s
    assert e.startup_s == pytest.approx(actual, rel=0.35)
