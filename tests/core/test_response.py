"""The linear response of the steady state against finite differences and full meter solves.

The variational equations of the shooting method (Aprille & Trick, Proc. IEEE 60(1), 1972)
give each node's sensitivity to parts and its Thevenin resistance in the period-average
sense. Checked here against the thing they linearise: the full nonlinear steady state solved
again with a parameter nudged (central differences), and with the meter's input resistance
actually on the node (Thevenin's theorem for the small-signal network: v = v_oc/(1 + R/Rm)).
"""

import numpy as np
import pytest

from fieldtool.core.circuit.expect import period_average
from fieldtool.core.circuit.netlist import build_circuit, with_meter
from fieldtool.core.circuit.response import linear_response
from fieldtool.core.circuit.solver import steady_state
from tests.conftest import make_profile

BOARDS = {
    "dc-ladder": make_profile(),
    "dc-ladder-negative": make_profile(board={"polarity": "negative"}, supply={"volts": 0.0}),
    "dickson": make_profile(board={"topology": "dickson"}, capacitor={"stray_farads": 5e-12}),
    "ac-ladder": make_profile(
        board={"topology": "ac-ladder"}, supply=None, drive={"volts": 10.0}, load={"ohms": 5e3}
    ),
}
TIGHT = 1e-11  # shooting tolerance for the differences (the default 1e-6 V is too coarse)


def _averages(circuit, params):
    ss = steady_state(circuit, params, tol=TIGHT)
    assert ss.converged.all()
    probe = np.array(circuit.probe_nodes) - 1
    return period_average(ss.period)[:, probe], ss


def _central(circuit, params, nudge, eps):
    up, down = params.copy(), params.copy()
    nudge(up, eps)
    nudge(down, -eps)
    return (_averages(circuit, up)[0] - _averages(circuit, down)[0]) / (2 * eps)


@pytest.mark.parametrize("board", BOARDS, ids=list(BOARDS))
def test_sensitivities_match_central_differences(board):
    profile = BOARDS[board]
    circuit, params = build_circuit(profile)
    base, ss = _averages(circuit, params)
    r = linear_response(circuit, params, ss.period.x_start)
    np.testing.assert_allclose(r.avg, base, atol=1e-9)
    scale = np.abs(base).max()

    def cap(j):
        def nudge(p, e):
            p.c_f[:, j] *= np.exp(e)

        return nudge

    def diode(j):
        def nudge(p, e):
            p.d_is[:, j] *= np.exp(-e / p.d_nvt[:, j])

        return nudge

    def drive(p, e):
        for i, s in enumerate(circuit.sources):
            if s.kind == "dc":
                continue
            if profile.topology == "ac-ladder":
                p.s_high[:, i] *= np.exp(e)
                p.s_low[:, i] *= np.exp(e)
            else:
                p.s_high[:, i] = p.s_low[:, i] + (p.s_high[:, i] - p.s_low[:, i]) * np.exp(e)

    checks = [(r.d_cap[0, :, 1], cap(1), 1e-3), (r.d_diode[0, :, 2], diode(2), 1e-3)]
    checks.append((r.d_drive[0], drive, 1e-4))
    for linear, nudge, eps in checks:
        fd = _central(circuit, params, nudge, eps)[0]
        np.testing.assert_allclose(linear, fd, atol=1e-5 * scale + 1e-3 * np.abs(fd).max())


@pytest.mark.parametrize("board", BOARDS, ids=list(BOARDS))
def test_thevenin_resistance_predicts_the_meter(board):
    profile = BOARDS[board]
    circuit, params = build_circuit(profile)
    base, ss = _averages(circuit, params)
    r = linear_response(circuit, params, ss.period.x_start)
    meter = 1e6  # a low-resistance meter, so the loading is visible (tens of mV)
    metered = steady_state(circuit, with_meter(circuit, params, meter), tol=TIGHT)
    probe = np.array(circuit.probe_nodes) - 1
    full = period_average(metered.period)[np.arange(len(probe)), probe]
    thevenin = r.avg[0] / (1.0 + r.thevenin_ohms[0] / meter)
    loading = np.abs(base[0] - full)
    assert loading.max() > 1e-3  # the check would be empty without a visible pull
    np.testing.assert_allclose(thevenin, full, atol=0.02 * loading.max() + 1e-6)
    assert (r.thevenin_ohms > 0).all()
