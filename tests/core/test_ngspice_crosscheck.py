"""The solver against ngspice (a general-purpose SPICE simulator, Debian package `ngspice`).

The same netlist (``fieldtool.core.circuit.spice``) is simulated by ngspice from the ideal-formula
initial charge until it settles; every S and P node's DC average must agree with the shooting
result within 0.5 % or 20 mV, whichever is larger, for each topology and polarity, at light
and at heavy load. Settling is checked, not assumed: light-load ladders approach their steady
state slowly and geometrically, so the settled value is the Aitken Δ² extrapolation of three
equally spaced period averages (A. C. Aitken, Proc. R. Soc. Edinburgh 46, 1926), and the
remaining drift it implies must itself be within the tolerance.
"""

import numpy as np
import pytest

from fieldtool.core.circuit.expect import period_average
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.solver import initial_state, steady_state
from fieldtool.core.circuit.spice import spice_netlist
from tests.conftest import make_profile, needs_ngspice, run_ngspice

CASES = {
    "dc-ladder-positive-light": dict(load={"ohms": 50000.0}),
    "dc-ladder-positive-heavy": dict(load={"ohms": 2000.0}),
    "dc-ladder-negative-light": dict(
        board={"polarity": "negative"}, supply={"volts": 0.0}, load={"ohms": 50000.0}
    ),
    "dc-ladder-negative-heavy": dict(
        board={"polarity": "negative"}, supply={"volts": 0.0}, load={"ohms": 2000.0}
    ),
    "ac-ladder-positive-light": dict(
        board={"topology": "ac-ladder"},
        supply=None,
        drive={"volts": 10.0},
        load={"ohms": 100000.0},
    ),
    "ac-ladder-positive-heavy": dict(
        board={"topology": "ac-ladder"},
        supply=None,
        drive={"volts": 10.0},
        load={"ohms": 5000.0},
    ),
    "ac-ladder-negative-heavy": dict(
        board={"topology": "ac-ladder", "polarity": "negative"},
        supply=None,
        drive={"volts": 10.0},
        load={"ohms": 5000.0},
    ),
    "dickson-light": dict(board={"topology": "dickson"}, load={"ohms": 50000.0}),
    "dickson-heavy": dict(board={"topology": "dickson"}, load={"ohms": None, "amps": 1e-3}),
    "dc-ladder-constant-current": dict(
        load={"ohms": None, "amps": 2e-3}, capacitor={"esr_ohms": 0.5}
    ),
}

PERIODS = 400


@needs_ngspice
@pytest.mark.parametrize("case", CASES, ids=list(CASES))
def test_node_averages_match_ngspice(case, tmp_path):
    profile = make_profile(**CASES[case])
    circuit, params = build_circuit(profile)
    ss = steady_state(circuit, params)
    assert ss.converged.all()
    ours = period_average(ss.period)[0]
    x0 = initial_state(circuit, params)
    first = PERIODS // 3
    netlist = spice_netlist(circuit, params, x0, PERIODS, first, points_per_period=200)
    t, v = run_ngspice(netlist, tmp_path)
    period = circuit.period_s
    probe = np.array(circuit.probe_nodes) - 1
    marks = [first + 1, (first + PERIODS) // 2 + 1, PERIODS]
    a1, a2, a3 = (_average(t, v, k * period, period)[probe] for k in marks)
    d1, d2 = a2 - a1, a3 - a2
    denom = d2 - d1
    geometric = (np.abs(denom) > 1e-12) & (d1 * d2 > 0) & (np.abs(d2) < np.abs(d1))
    settled = np.where(geometric, a3 - d2 * d2 / np.where(geometric, denom, 1.0), a3)
    tol = np.maximum(0.005 * np.abs(settled), 0.020)
    remaining = np.abs(settled - a3)
    assert (remaining <= tol).all(), f"ngspice far from settled: {remaining.max():.4g} V to go"
    err = np.abs(ours[probe] - settled)
    worst = int(np.argmax(err / tol))
    assert (err <= tol).all(), (
        f"node {circuit.node_names[probe[worst]]}: ours {ours[probe[worst]]:.4f} V, "
        f"ngspice {settled[worst]:.4f} V (last period {a3[worst]:.4f} V)"
    )


def _average(t, v, end, period):
    sel = (t >= end - period - 1e-15) & (t <= end + 1e-15)
    return np.trapezoid(v[sel], t[sel], axis=0) / (t[sel][-1] - t[sel][0])
