"""Readings beyond DC volts against ngspice (a general-purpose SPICE simulator).

Each instrument is built into the SPICE text from its parts (``tests.ngspice_instruments``:
the scope probe, the DC-blocked AC meter with its bandwidth as an RC low-pass, the burden in
the supply lead, the test load, the diode test's current source clamped at its open-circuit
voltage), independently of ``fieldtool.core.circuit.readouts``, and ngspice's settled waveform
gives the reading. Small boards (three stages, 47 nF at 10 kHz) settle in a few hundred
periods, so each run takes a second or two; runs shared between checks are cached for the
test session.

Tolerances: ripple peak to peak within 3 % or the scope's 1 mV (the solver's 80-step grid
against ngspice's T/400 steps; a pump node's edge spike is the largest part of it); AC RMS
within 2 % or 0.1 mV; DC and currents within 0.5 % or 20 mV, as the solver cross-check; diode
tests within 2 mV.
"""

from __future__ import annotations

import functools
import hashlib

import numpy as np
import pytest

from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.readouts.diode_test import diode_tests
from fieldtool.core.circuit.readouts.powered import powered_readouts
from fieldtool.core.circuit.readouts.spread import accuracy_sigma, tolerance_sigma
from fieldtool.core.circuit.response import linear_response
from fieldtool.core.circuit.solver import steady_state
from tests import ngspice_instruments as bench
from tests.conftest import make_profile, needs_ngspice
from tests.ngspice_probe import SpiceFault, write_fault

pytestmark = needs_ngspice

SMALL = dict(capacitor={"farads": 47e-9, "esr_ohms": 0.05}, load={"ohms": 1e6})
BOARDS = {
    "dc-ladder": make_profile(board={"name": "bench-dc-ladder"}, **SMALL),
    "dickson": make_profile(board={"name": "bench-dickson", "topology": "dickson"}, **SMALL),
    "ac-ladder": make_profile(
        board={"name": "bench-ac-ladder", "topology": "ac-ladder"},
        supply=None,
        drive={"volts": 10.0},
        load={"ohms": 20e3},
    ),
}
TEST_LOAD = 100e3
_RUNS: dict[str, bench.BenchRun] = {}


def _run(board, node, extra, vectors, tmp_path, fault=None, edit=None, max_drift=np.inf):
    """One settled ngspice run, cached for the session by its inputs."""
    profile = BOARDS[board]
    circuit, params = build_circuit(profile)

    def written(text):
        if fault is not None:
            text = write_fault(text, circuit, fault)
        return edit(text) if edit is not None else text

    key = hashlib.sha256(repr((board, node, extra, vectors, fault, edit)).encode()).hexdigest()
    if key not in _RUNS:
        settle = f"v({node.lower()})"
        _RUNS[key] = bench.powered_run(
            circuit,
            params,
            extra,
            vectors,
            settle,
            tmp_path / key[:8],
            edit=written,
            max_drift=max_drift,
        )
    return _RUNS[key]


@functools.cache
def _predict(board, fault=None):
    """The tool's solve and readings of a board (optionally with a fault), once a session."""
    profile = BOARDS[board]
    circuit, params = build_circuit(profile)
    if fault is not None:
        params = _apply(circuit, params, fault)
    ss = steady_state(circuit, params)
    assert ss.converged.all()
    readouts = powered_readouts(circuit, params, ss.period, profile, (TEST_LOAD,), spreads=False)
    return circuit, params, ss, readouts


def _apply(circuit, params, fault: SpiceFault):
    p = params.copy()
    j = circuit.cap_refs.index(fault.ref)
    if fault.mode == "lowcap":
        p.c_f[:, j] *= fault.fraction
    elif fault.mode == "esr":
        p.c_esr[:, j] *= fault.factor
    else:
        raise ValueError(fault.mode)
    return p


def _probe_lines(board, node):
    inst = BOARDS[board].instruments
    return bench.scope_probe(node, inst.probe_ohms, inst.probe_farads)


def _ac_lines(board, node):
    inst, period = BOARDS[board].instruments, BOARDS[board].period_s
    return bench.ac_meter(
        node, inst.ac_input_ohms, inst.ac_input_farads, inst.ac_bandwidth_hz, period
    )


def _scope(board, node, tmp_path, ripple, fault=None):
    """(ripple p-p, every probe node's average) with the scope probe on ``node``.

    The run must drift by less than 0.5 % of the expected ``ripple`` a period.
    """
    circuit, _ = build_circuit(BOARDS[board])
    names = [circuit.name(i) for i in circuit.probe_nodes]
    vectors = [f"v({n.lower()})" for n in names]
    lines = _probe_lines(board, node)
    run = _run(board, node, lines, vectors, tmp_path, fault, max_drift=5e-3 * ripple)
    wave = run.values[:, names.index(node)]
    averages = {n: bench.period_average(run, i) for i, n in enumerate(names)}
    return float(wave.max() - wave.min()), averages


def _ac(board, node, tmp_path, expected, fault=None):
    """The AC meter's reading on ``node``; the run drifts by under 1 % of it a period (a
    drift δ a period adds about δ/(2√3) to the RMS)."""
    lines = _ac_lines(board, node)
    run = _run(board, node, lines, ["v(acm2)"], tmp_path, fault, max_drift=1e-2 * expected)
    return bench.ac_rms(run)


NODES = [
    ("dc-ladder", "P2"),
    ("dc-ladder", "S2"),
    ("dc-ladder", "S3"),
    ("dickson", "P2"),
    ("dickson", "OUT"),
    ("ac-ladder", "P1"),
    ("ac-ladder", "S1"),
]


@pytest.mark.parametrize("board, node", NODES, ids=[f"{b}-{n}" for b, n in NODES])
def test_ripple_and_ac_rms_match_ngspice(board, node, tmp_path):
    *_, r = _predict(board)
    j = r.nodes.index(node)
    ripple, _ = _scope(board, node, tmp_path, r.ripple_pp[0, j])
    assert r.ripple_pp[0, j] == pytest.approx(ripple, rel=0.03, abs=1e-3)
    ac = _ac(board, node, tmp_path, r.ac_rms[0, j])
    assert r.ac_rms[0, j] == pytest.approx(ac, rel=0.02, abs=1e-4)


@pytest.mark.parametrize("board", ["dc-ladder", "dickson"])
def test_supply_current_through_the_burden_matches_ngspice(board, tmp_path):
    profile = BOARDS[board]
    circuit, params, ss, r = _predict(board)
    supply = next(i for i, s in enumerate(circuit.sources) if s.kind == "dc")
    burden = profile.instruments.burden_ohms

    def edit(text):
        return bench.burden(text, supply, burden)

    out = circuit.name(circuit.output_node)
    run = _run(board, out, [], [f"i(v{supply})", f"v({out.lower()})"], tmp_path, edit=edit)
    # SPICE reports a source's current into its positive terminal: the supply's is negative.
    amps = -bench.period_average(run, 0)
    assert r.supply_amps[0] == pytest.approx(amps, rel=0.005)
    # Charge balance: in steady state every capacitor's average current is zero, so each
    # diode of the chain, and the supply lead, passes the output current on average
    # (Kirchhoff's current law; leakage here is below 10⁻⁴ of it).
    load_amps = bench.period_average(run, 1) / profile.load_ohms
    assert amps == pytest.approx(load_amps, rel=0.002)


def test_driver_rail_current_matches_a_switched_driver_in_ngspice(tmp_path):
    # ngspice: the drive made by two switches from a rail behind the burden and a bypass
    # capacitor (an independent model of a push-pull driver); the meter reads i(VRAIL).
    profile = BOARDS["dc-ladder"]
    circuit, params, ss, r = _predict("dc-ladder")
    drive = next(i for i, s in enumerate(circuit.sources) if s.kind == "square")
    T = circuit.period_s

    def edit(text):
        return bench.driver_from_rail(
            text,
            drive,
            profile.drive_volts,
            profile.drive_ohms,
            profile.instruments.burden_ohms,
            T,
            circuit.edge_fraction * T,
        )

    out = circuit.name(circuit.output_node)
    run = _run("dc-ladder", out, [], ["i(vrail)", f"v({out.lower()})"], tmp_path, edit=edit)
    amps = -bench.period_average(run, 0)
    assert r.rail_amps[0] == pytest.approx(amps, rel=0.01)
    # Charge balance: each of the N flying capacitors passes the output current, pushed up by
    # the driver while it is high: N·I_out from the rail (Tanzawa & Tanaka 1997, from memory).
    n_iout = profile.stages * bench.period_average(run, 1) / profile.load_ohms
    assert amps == pytest.approx(n_iout, rel=0.01)


@pytest.mark.parametrize(
    "board, node", [("dc-ladder", "S3"), ("dc-ladder", "S1"), ("dickson", "OUT")]
)
def test_dc_under_a_test_load_matches_ngspice(board, node, tmp_path):
    profile = BOARDS[board]
    circuit, params, ss, r = _predict(board)
    out = circuit.name(circuit.output_node).lower()
    extra = [f"RTEST {out} 0 {TEST_LOAD:.9g}", f"RMETER {node.lower()} 0 {profile.meter_ohms:.9g}"]
    run = _run(board, node, extra, [f"v({node.lower()})"], tmp_path)
    spice = bench.period_average(run)
    tol = max(0.005 * abs(spice), 0.020)
    assert abs(r.dc_loaded[0, 0, r.nodes.index(node)] - spice) <= tol


# --- diode test, board off ---------------------------------------------------------------


def _ends(circuit, ref, reverse):
    a, c = (circuit.name(int(i)) for i in circuit.diode_nodes[circuit.diode_refs.index(ref)])
    red, black = (c, a) if reverse else (a, c)
    return ("0" if red == "GND" else red), ("0" if black == "GND" else black)


def _diode_op(profile, circuit, params, ref, reverse, tmp_path, edit=None):
    inst = profile.instruments
    red, black = _ends(circuit, ref, reverse)
    meter = bench.DiodeMeter(red, black, inst.diode_test_amps, inst.diode_test_volts)
    return bench.diode_test_op(circuit, params, meter, tmp_path / f"{ref}{reverse}", edit)


@pytest.mark.parametrize("board", ["dc-ladder", "dickson", "ac-ladder"])
def test_diode_test_readings_match_ngspice_dc(board, tmp_path):
    # ngspice's DC operating point of the unpowered board (capacitors open) with the meter's
    # test current source clamped at its open-circuit voltage, against the tool's settled
    # transient. Forward: within 2 mV; reverse: OL on both (the clamp holds ngspice within a
    # few tens of millivolts of the open-circuit voltage).
    profile = BOARDS[board]
    circuit, params = build_circuit(profile)
    tests = diode_tests(circuit, params, profile.instruments)
    limit = profile.instruments.diode_test_volts
    for i, ref in enumerate(tests.diodes):
        forward = _diode_op(profile, circuit, params, ref, False, tmp_path)
        assert tests.volts[0, i, 0] == pytest.approx(forward, abs=0.002), ref
        assert not tests.lift[0, i, 0] and tests.share[0, i, 0] > 0.99, ref
        reverse = _diode_op(profile, circuit, params, ref, True, tmp_path)
        assert tests.over_range[0, i, 1] and reverse > limit - 0.05, (ref, reverse)


def test_diode_test_through_a_parallel_path_matches_ngspice(tmp_path):
    # One stage with a 1 kΩ load: tested in reverse, the test current finds a path round the
    # part (the other diode and the load), so the meter reads about 1 mA × 1 kΩ plus a diode
    # drop instead of OL: still a number, and still one a shorted part would pull to 0 V.
    profile = make_profile(board={"stages": 1}, load={"ohms": 1e3})
    circuit, params = build_circuit(profile)
    tests = diode_tests(circuit, params, profile.instruments, ("D1",))
    spice = _diode_op(profile, circuit, params, "D1", True, tmp_path)
    assert 1.0 < spice < profile.instruments.diode_test_volts
    assert tests.volts[0, 0, 1] == pytest.approx(spice, abs=0.002)
    assert not tests.lift[0, 0, 1]


def test_diode_test_with_a_shorted_capacitor_across_it_says_lift_one_leg(tmp_path):
    # AC ladder: C1 runs from P1 to the AC input, which sits behind the source's 2 Ω when the
    # board is off; D1 runs from ground to P1. With C1 shorted, that 2 Ω is across D1 and
    # takes nearly all the test current: the reading (a few millivolts) says nothing of D1.
    profile = BOARDS["ac-ladder"]
    circuit, params = build_circuit(profile)
    shorted = params.copy()
    shorted.c_gl[:, circuit.cap_refs.index("C1")] = 1.0 / 0.05
    tests = diode_tests(circuit, shorted, profile.instruments, ("D1",))

    def edit(text):
        return write_fault(text, circuit, SpiceFault("C1", "short", ohms=0.05))

    spice = _diode_op(profile, circuit, params, "D1", False, tmp_path, edit)
    assert tests.volts[0, 0, 0] == pytest.approx(spice, abs=0.002)
    assert tests.lift[0, 0, 0] and tests.share[0, 0, 0] < 0.01
    assert "parallel path" in tests.reason(0, 0, 0)


def test_diode_test_behind_a_large_discharged_capacitor_says_lift_one_leg(tmp_path):
    # One stage with 10 mF capacitors: testing D1 forward, the test current first charges the
    # flying capacitor C1 (its other end is grounded through the drive's source when off) to
    # the diode's drop: t ≈ C·V/I = 10 mF × 0.58 V / 1 mA ≈ 5.8 s, longer than a technician
    # waits (3 s, common practice, no source). ngspice's transient from all discharged agrees
    # that the reading is still climbing at 3 s and settled by 10 s.
    profile = make_profile(board={"stages": 1}, capacitor={"farads": 10e-3})
    circuit, params = build_circuit(profile)
    tests = diode_tests(circuit, params, profile.instruments, ("D1",))
    assert tests.lift[0, 0, 0]
    assert "settle" in tests.reason(0, 0, 0)
    inst = profile.instruments
    meter = bench.DiodeMeter("S0", "P1", inst.diode_test_amps, inst.diode_test_volts)
    t, reading = bench.diode_test_transient(circuit, params, meter, 12.0, tmp_path)
    final = reading[-1]
    at_limit = np.interp(profile.instruments.diode_settle_s, t, reading)
    accuracy = final * profile.instruments.diode_accuracy_percent / 100 + 0.002
    assert final - at_limit > accuracy
    settled = t[np.flatnonzero(np.abs(reading - final) > accuracy)[-1] + 1]
    assert tests.settle_s[0, 0, 0] == pytest.approx(settled, rel=0.1)
    assert tests.volts[0, 0, 0] == pytest.approx(final, abs=0.003)


# --- worn parts: what DC volts cannot see ------------------------------------------------


def _healthy_band(board):
    """Every probe node's as-read DC band on the healthy board: mean ± 2σ (tolerances and the
    meter's accuracy, first order; the fault dictionary's construction)."""
    profile = BOARDS[board]
    circuit, params, ss, _ = _predict(board)
    resp = linear_response(circuit, params, ss.period.x_start)
    mean = (resp.avg / (1.0 + resp.thevenin_ohms / profile.meter_ohms))[0]
    tol = tolerance_sigma(profile, circuit, resp.d_cap, resp.d_diode, resp.d_drive, resp.d_supply)
    sigma = np.sqrt(tol[0] ** 2 + accuracy_sigma(profile, "dc", mean) ** 2)
    return mean, 2 * sigma


WORN = [
    # Reservoir at a quarter of its value (electrolytic wear-out): the ripple on its own node
    # grows about fourfold, I/(f·C) (Horowitz & Hill, as in test_readouts).
    ("dc-ladder", SpiceFault("C4", "lowcap", fraction=0.25), "S2"),
    ("dickson", SpiceFault("C4", "lowcap", fraction=0.25), "OUT"),
    # ESR grown 80× (0.05 → 4 Ω; a dried-out electrolytic): it shows where the reservoir is
    # recharged in short pulses (the sine-fed ladder), as the pulse current times the ESR.
    ("ac-ladder", SpiceFault("C2", "esr", factor=80.0), "S1"),
]


@pytest.mark.parametrize(
    "board, fault, node", WORN, ids=[f"{b}-{f.ref}-{f.mode}" for b, f, _ in WORN]
)
def test_worn_reservoir_multiplies_its_ripple_while_dc_stays_in_band(board, fault, node, tmp_path):
    *_, healthy = _predict(board)
    j = healthy.nodes.index(node)
    *_, worn = _predict(board, fault)
    spice_healthy, _ = _scope(board, node, tmp_path, healthy.ripple_pp[0, j])
    spice_worn, averages = _scope(board, node, tmp_path, worn.ripple_pp[0, j], fault)
    assert spice_worn >= 3.0 * spice_healthy, (spice_worn, spice_healthy)
    assert worn.ripple_pp[0, j] == pytest.approx(spice_worn, rel=0.05)
    # Every node's DC reading stays inside its healthy band (ngspice's averages with no
    # voltmeter on the node: on these boards the meter pulls them by under 0.1 %).
    mean, half = _healthy_band(board)
    for k, name in enumerate(worn.nodes):
        assert abs(averages[name] - mean[k]) <= half[k], (name, averages[name], mean[k], half[k])


FLYING = [
    ("dc-ladder", SpiceFault("C3", "lowcap", fraction=0.3)),
    ("dickson", SpiceFault("C2", "lowcap", fraction=0.3)),
]


@pytest.mark.parametrize("board, fault", FLYING, ids=[f"{b}-{f.ref}" for b, f in FLYING])
def test_flying_capacitor_loss_shows_under_a_test_load(board, fault, tmp_path):
    # A flying capacitor at 30 % raises the ladder's output resistance, (1/f)·Σ 1/C over the
    # capacitors the output charge passes (switched-capacitor slow-switching limit, Seeman &
    # Sanders, IEEE Trans. Power Electron. 23(2), 2008; from memory): the drop the test load
    # causes at the output grows by a third or more, while the unloaded reading stays in band.
    profile = BOARDS[board]
    circuit, *_, healthy = _predict(board)
    *_, worn = _predict(board, fault)
    out = circuit.name(circuit.output_node)
    o = healthy.nodes.index(out)
    meter = f"RMETER {out.lower()} 0 {profile.meter_ohms:.9g}"
    load = f"RTEST {out.lower()} 0 {TEST_LOAD:.9g}"

    def reading(extra, f=None):
        return bench.period_average(_run(board, out, extra, [f"v({out.lower()})"], tmp_path, f))

    drop_healthy = reading([meter]) - reading([load, meter])
    unloaded_worn = reading([meter], fault)
    drop_worn = unloaded_worn - reading([load, meter], fault)
    assert drop_worn >= 1.25 * drop_healthy, (drop_worn, drop_healthy)
    tool_drop = _predict_unloaded(board, fault)[o] - worn.dc_loaded[0, 0, o]
    assert tool_drop == pytest.approx(drop_worn, rel=0.03)
    mean, half = _healthy_band(board)
    assert abs(unloaded_worn - mean[o]) <= half[o]


def _predict_unloaded(board, fault):
    """The tool's as-read DC at every probe node with no test load (the meter in place)."""
    profile = BOARDS[board]
    circuit, params, ss, _ = _predict(board, fault)
    resp = linear_response(circuit, params, ss.period.x_start)
    return (resp.avg / (1.0 + resp.thevenin_ohms / profile.meter_ohms))[0]
