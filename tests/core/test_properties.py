"""Properties of the periodic steady state (Hypothesis), over random valid boards."""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.solver import Network, StepState, period_grid, run_period, steady_state
from tests.conftest import make_profile

boards = st.fixed_dictionaries(
    {
        "stages": st.integers(1, 5),
        "volts": st.floats(3.0, 24.0),
        "farads": st.floats(0.2e-6, 20e-6),
        "ohms": st.floats(2e3, 1e6),
        "polarity": st.sampled_from(["positive", "negative"]),
    }
)


def _profile(b):
    return make_profile(
        board={"stages": b["stages"], "polarity": b["polarity"]},
        supply={"volts": b["volts"] if b["polarity"] == "positive" else 0.0},
        drive={"volts": b["volts"]},
        capacitor={"farads": b["farads"]},
        load={"ohms": b["ohms"]},
    )


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(boards)
def test_steady_state_repeats_after_one_period(b):
    circuit, params = build_circuit(_profile(b))
    ss = steady_state(circuit, params)
    assert ss.converged.all()
    net = Network(circuit, params)
    state = StepState(ss.period.v[:, -1].copy(), np.zeros((1, len(circuit.diode_refs))))
    again = run_period(net, ss.period.x_start, period_grid(circuit), state, sens=False)
    scale = 1 + np.abs(ss.period.x_start).max()
    assert np.abs(again.x_end - ss.period.x_start).max() <= 2e-5 * scale


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(boards)
def test_charge_balance(b):
    """Over a steady-state period every capacitor gains no net charge, so the charge the
    supply delivers into the chain equals the charge the load takes (plus leakage)."""
    e = expect(_profile(b))
    i_out = abs(e.output_volts) / b["ohms"]
    assert abs(abs(e.supply_current_a) - i_out) <= 0.01 * i_out + 1e-7
