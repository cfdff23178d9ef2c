"""The compiled inner loop against the numpy reference it replaces.

The kernel (``fieldtool/core/circuit/_kernel.c``) must compute what the numpy reference in
``solver`` and ``response`` computes (the reference is the one checked against ngspice in
test_ngspice_crosscheck.py and against finite differences in test_response.py): the same
backward-Euler grid, Newton iteration, limiting and tolerances, with only the linear algebra
done differently (an L·D·Lᵀ factorisation of the nodal matrix, which is symmetric positive
definite; Golub & Van Loan, *Matrix Computations*, 4th ed., §4.2). Agreement is asked to
within rounding, far inside every tolerance the solver is checked to.
"""

from contextlib import nullcontext

import numpy as np
import pytest

from fieldtool.core.circuit import kernel
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.response import linear_response
from fieldtool.core.circuit.solver import (
    Network,
    StepState,
    initial_state,
    period_grid,
    run_period,
    steady_state,
    step,
)
from fieldtool.core.diagnosis.dictionary import profile_variants
from tests.conftest import make_profile

BOARDS = {
    "dc-ladder": make_profile(),
    "dc-ladder-negative": make_profile(board={"polarity": "negative"}, supply={"volts": 0.0}),
    "dc-ladder-constant-current": make_profile(load={"ohms": None, "amps": 2e-3}),
    "dickson-stray": make_profile(board={"topology": "dickson"}, capacitor={"stray_farads": 5e-12}),
    "ac-ladder-sine": make_profile(
        board={"topology": "ac-ladder"}, supply=None, drive={"volts": 10.0}, load={"ohms": 5e3}
    ),
    "ac-ladder-square": make_profile(
        board={"topology": "ac-ladder", "stages": 4},
        supply=None,
        drive={"volts": 10.0, "waveform": "square"},
    ),
}
VOLTS = 1e-8  # V: rounding only (the solver's own tolerance is 1e-6 V)


def test_the_kernel_is_built_and_current():
    # `pip install -e .` compiles it (setup.py); a missing or stale build would leave the
    # solver on the numpy reference, correct but tens of times slower.
    assert kernel.available(), "run `pip install -e .` again to build the solver's kernel"


@pytest.mark.parametrize("board", BOARDS, ids=list(BOARDS))
def test_steady_state_matches_the_reference(board):
    circuit, params = build_circuit(BOARDS[board])
    fast = steady_state(circuit, params)
    with kernel.disabled():
        assert not kernel.available()
        ref = steady_state(circuit, params)
    assert fast.converged.all() and ref.converged.all()
    assert fast.shooting_iterations == ref.shooting_iterations
    np.testing.assert_allclose(fast.period.x_start, ref.period.x_start, rtol=0, atol=VOLTS)
    np.testing.assert_allclose(fast.period.v, ref.period.v, rtol=0, atol=VOLTS)
    np.testing.assert_allclose(fast.period.vj, ref.period.vj, rtol=0, atol=VOLTS)
    np.testing.assert_allclose(fast.period.monodromy, ref.period.monodromy, rtol=0, atol=1e-8)


@pytest.mark.parametrize("board", BOARDS, ids=list(BOARDS))
def test_linear_response_matches_the_reference(board):
    circuit, params = build_circuit(BOARDS[board])
    x0 = steady_state(circuit, params).period.x_start
    fast = linear_response(circuit, params, x0, 40)
    with kernel.disabled():
        ref = linear_response(circuit, params, x0, 40)
    for name in ("avg", "ripple", "d_drive", "d_supply"):
        np.testing.assert_allclose(getattr(fast, name), getattr(ref, name), rtol=1e-9, atol=1e-9)
    for name in ("thevenin_ohms", "d_cap", "d_diode"):
        np.testing.assert_allclose(getattr(fast, name), getattr(ref, name), rtol=1e-7, atol=1e-9)


def test_every_catalogued_fault_integrates_as_the_reference_does():
    # Opens and shorts put conductances of 1e-12 … 1e3 S side by side: the factorisation
    # without pivoting must still agree (one period with sensitivities, from the ideal charge).
    circuit, params, _, _ = profile_variants(make_profile())
    times = period_grid(circuit, 40)
    x0 = initial_state(circuit, params)
    k = len(circuit.diode_refs)

    def period():
        state = StepState(np.zeros((params.batch, circuit.n)), np.zeros((params.batch, k)))
        return run_period(Network(circuit, params), x0, times, state, sens=True)

    fast = period()
    with kernel.disabled():
        ref = period()
    scale = 1.0 + np.abs(ref.v).max(axis=(1, 2))
    err = np.abs(fast.v - ref.v).max(axis=(1, 2)) / scale
    assert err.max() <= 1e-9, f"variant {int(err.argmax())} differs by {err.max():.3g} (relative)"
    np.testing.assert_allclose(fast.monodromy, ref.monodromy, rtol=0, atol=1e-7)


def test_one_step_with_its_sensitivity_matches_the_reference():
    circuit, params = build_circuit(BOARDS["dickson-stray"])
    x0 = initial_state(circuit, params)
    b = Network(circuit, params).injections(np.array([[[5.0, 5.0, 0.0]]]))[:, 0]
    out = []
    for off in (False, True):
        state = StepState(np.zeros((1, circuit.n)), np.zeros((1, len(circuit.diode_refs))))
        with kernel.disabled() if off else nullcontext():
            x, S, _ = step(Network(circuit, params), x0, state, b, 1e-6, True)
        out.append((x, S, state.v))
    for fast, ref in zip(out[0], out[1], strict=True):
        np.testing.assert_allclose(fast, ref, rtol=0, atol=VOLTS)


def test_a_matrix_that_is_not_positive_definite_is_never_an_answer():
    # A negative conductance to ground (no real board has one) makes the nodal matrix
    # indefinite: the kernel refuses to factor it, and the variant is reported unconverged.
    circuit, params = build_circuit(BOARDS["dc-ladder"])
    bad = params.copy()
    bad.g_shunt[0, 0] = -10.0
    ss = steady_state(circuit, bad, fallback_periods=0, max_iterations=3)
    assert not ss.converged[0]


@pytest.mark.parametrize("topology", ["dc-ladder", "ac-ladder", "dickson"])
def test_elimination_order_keeps_the_factor_linear_in_stages(topology):
    # Envelope storage of a banded matrix with a few dense border rows (the source nodes,
    # placed last): George & Liu, *Computer Solution of Large Sparse Positive Definite
    # Systems*, 1981, ch. 4. Each node's row must reach back only to its stage's neighbours.
    sizes = []
    for stages in (4, 8, 16):
        board = {"topology": topology, "stages": stages}
        supply = None if topology == "ac-ladder" else {}
        circuit, _ = build_circuit(make_profile(board=board, supply=supply))
        o = kernel.ordering(circuit)
        assert sorted(o.perm) == list(range(circuit.n))
        sources = {s.node - 1 for s in circuit.sources}
        assert set(o.perm[circuit.n - len(sources) :]) == sources
        pairs = np.concatenate([circuit.diode_nodes, circuit.cap_nodes])
        for a, b in pairs[(pairs[:, 0] > 0) & (pairs[:, 1] > 0)]:
            lo, hi = sorted((o.position[a - 1], o.position[b - 1]))
            assert o.first[hi] <= lo  # every connection lies inside the envelope
        sizes.append(int(o.start[-1]))
    assert sizes[2] - sizes[1] <= 2.2 * (sizes[1] - sizes[0])
