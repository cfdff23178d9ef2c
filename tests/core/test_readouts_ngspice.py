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
from fieldtool.core.circuit.readouts.powered import powered_readouts
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
    ("ac-ladder", "S2"),
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
