"""Power off, discharged: what the meter's diode-test mode reads across each diode in circuit.

The meter drives a constant test current (``[meter] diode_test_amps``, about 1 mA) from its
red lead into the part and shows the voltage across its leads, or OL where that would pass its
open-circuit voltage (``diode_test_volts``, about 3 V); both common practice, no source. The
board is off: the supply and the drive sit at 0 V behind their source resistances (as in
``expect.discharge_time``), a constant-current load draws nothing, and every capacitor starts
discharged. The diode under test then shares the test current with every parallel path the
netlist has (other diodes, the load and bleeder, leakage), and the discharged capacitors in
those paths take current until they have charged: the reading starts near 0 V and climbs.

So the reading is simulated as it happens, not only at DC: backward Euler on the board's own
netlist (``solver.step``) from all-discharged, with steps growing geometrically from 1 µs to
``SETTLE_HORIZON_S``, each 5 % of the time so far between a tenth and ten times the settle
limit (where the verdict is decided; the settle time there agrees with ngspice within a few
percent) and 50 % elsewhere, the meter an ideal current source between the part's terminals. The
reading is the voltage at the end; it settles once it stays within the meter's diode-test
accuracy of that. Each diode is tested both ways: forward (red lead on the anode: a healthy
silicon part about 0.5–0.7 V, a Schottky about 0.2–0.3 V) and reverse (red on the cathode:
OL unless a parallel path conducts below the open-circuit voltage).

A reading tells nothing about the part, and the answer is "lift one leg to test this part",
where it takes longer than ``[meter] diode_settle_s`` to settle (the capacitors' C·V/I), or
where, tested forward, a parallel path carries more than half of the test current.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import Network, StepState, newton, step
from fieldtool.core.circuit.spec import InstrumentSpec

FIRST_STEP_S = 1e-6
STEP_GROWTH = 1.05  # near the limit each step is 5 % of the time so far (settle time to ~5 %)
COARSE_GROWTH = 1.5  # away from it, where only the final value matters
FINAL_ONLY_GROWTH = 3.0  # no settle time wanted: only the final value (``settle=False``)
SETTLE_HORIZON_S = 100.0  # a reading still moving after this is never read
PARALLEL_SHARE = 0.5  # forward: the part must carry at least this share of the test current
DIRECTIONS = ("forward", "reverse")


@dataclass(frozen=True)
class DiodeTests:
    """Diode-test readings of B variants, k diodes, both directions (forward, reverse)."""

    diodes: tuple[str, ...]  # (k,) default designators
    volts: np.ndarray  # (B, k, 2) the settled reading; NaN where the meter shows OL
    over_range: np.ndarray  # (B, k, 2) bool: OL
    settle_s: np.ndarray  # (B, k, 2) seconds until it stays within the meter's accuracy
    share: np.ndarray  # (B, k, 2) fraction of the test current through the part itself
    volts_per_drop: np.ndarray  # (B, k, 2, k) ∂reading/∂(each diode's forward drop)
    lift: np.ndarray  # (B, k, 2) bool: the reading tells nothing; lift one leg
    settle_limit_s: float

    def reason(self, b: int, i: int, direction: int) -> str:
        """Why one reading tells nothing about its part ('' when it does)."""
        if not self.lift[b, i, direction]:
            return ""
        if self.settle_s[b, i, direction] > self.settle_limit_s:
            t = self.settle_s[b, i, direction]
            took = "never settles" if not np.isfinite(t) else f"takes {t:.3g} s to settle"
            return f"the reading {took} while the capacitors around it charge"
        other = 1.0 - self.share[b, i, direction]
        return f"a parallel path takes {other:.0%} of the test current"


def power_off(params: Params) -> Params:
    """The same variants with every source at 0 V and constant-current loads off."""
    p = params.copy()
    p.s_high[:] = 0.0
    p.s_low[:] = 0.0
    p.i_load[:] = 0.0
    return p


def diode_tests(
    circuit: Circuit,
    params: Params,
    instruments: InstrumentSpec,
    diodes: tuple[str, ...] | None = None,
) -> DiodeTests:
    """The diode-test reading of each listed diode (default all), both ways, per variant."""
    refs = circuit.diode_refs if diodes is None else tuple(diodes)
    cols = np.array([circuit.diode_refs.index(r) for r in refs], dtype=np.intp)
    B, k = params.batch, len(cols)
    variant = np.repeat(np.arange(B), 2 * k)
    part = np.tile(np.repeat(cols, 2), B)
    reverse = np.tile(np.array([False, True]), B * k)
    t = diode_test_rows(circuit, params, instruments, variant, part, reverse)
    shape = (B, k, 2)
    return DiodeTests(
        diodes=refs,
        volts=t.volts.reshape(shape),
        over_range=t.over_range.reshape(shape),
        settle_s=t.settle_s.reshape(shape),
        share=t.share.reshape(shape),
        volts_per_drop=t.volts_per_drop.reshape(*shape, -1),
        lift=t.lift.reshape(shape),
        settle_limit_s=instruments.diode_settle_s,
    )


@dataclass(frozen=True)
class DiodeTestRows:
    """Diode-test readings for R chosen (variant, diode, direction) triples, flat."""

    volts: np.ndarray  # (R,) the settled reading; NaN where the meter shows OL
    over_range: np.ndarray  # (R,) bool
    settle_s: np.ndarray  # (R,) inf where a coarse run cannot tell (``settle=False``)
    share: np.ndarray  # (R,) fraction of the test current through the part itself
    volts_per_drop: np.ndarray  # (R, k_all) ∂reading/∂(each diode's forward drop)
    lift: np.ndarray  # (R,) bool (only meaningful with ``settle=True``)


def diode_test_rows(
    circuit: Circuit,
    params: Params,
    instruments: InstrumentSpec,
    variant: np.ndarray,
    part: np.ndarray,
    reverse: np.ndarray,
    settle: bool = True,
) -> DiodeTestRows:
    """The diode tests of chosen triples: variant row, diode column, reversed or not.

    With ``settle`` False the run takes coarse steps throughout (about a seventh of the steps):
    the settled reading and its sensitivities are the same, the settle time is not computed
    (inf) and ``lift`` only reflects the parallel paths (for callers that judge settling on
    another board, such as the fault dictionary judging it on the healthy one).
    """
    ends = circuit.diode_nodes[part]  # (R, 2) anode, cathode
    red = np.where(reverse, ends[:, 1], ends[:, 0])
    black = np.where(reverse, ends[:, 0], ends[:, 1])
    rows = power_off(params).take(variant)
    net = Network(circuit, rows)
    R, n = rows.batch, circuit.n
    inject = np.zeros((R, n + 1))
    amps = instruments.diode_test_amps
    np.add.at(inject, (np.arange(R), red), amps)
    np.add.at(inject, (np.arange(R), black), -amps)
    b_src = inject[:, 1:]  # ground (index 0) takes the rest
    reading, times, (J, state) = _transient(net, b_src, red, black, instruments, settle)
    final = reading[:, -1]
    tol = (
        np.abs(final) * instruments.diode_accuracy_percent / 100 + instruments.diode_accuracy_volts
    )
    over = (reading > instruments.diode_test_volts).any(axis=1)
    if settle:
        settle_s = np.where(over, 0.0, settle_time(times, reading, tol))
    else:
        settle_s = np.where(over, 0.0, np.inf)
    share = _part_current(rows, state, part, reverse, net) / amps
    sens = _drop_sensitivity(rows, state, net, J, red, black)  # (R, k_all)
    slow = settle_s > instruments.diode_settle_s if settle else np.zeros(R, dtype=bool)
    lift = ~over & (slow | (~reverse & (share < PARALLEL_SHARE)))
    return DiodeTestRows(
        volts=np.where(over, np.nan, final),
        over_range=over,
        settle_s=settle_s,
        share=share,
        volts_per_drop=sens,
        lift=lift,
    )


def settle_time(times: np.ndarray, reading: np.ndarray, tol: np.ndarray) -> np.ndarray:
    """(R,) when each reading last comes within ``tol`` of its final value, interpolated.

    Linear between the last sample still outside and the next; inf where the reading is
    still moving at the end of the run, 0 where it was never outside.
    """
    miss = np.abs(reading - reading[:, -1:]) - tol[:, None]  # > 0: still outside
    outside = miss > 0
    S = reading.shape[1]
    last = np.where(outside.any(axis=1), S - 1 - np.argmax(outside[:, ::-1], axis=1), -1)
    r = np.arange(len(reading))
    nxt = np.minimum(last + 1, S - 1)
    m0, m1 = miss[r, np.maximum(last, 0)], miss[r, nxt]
    t0, t1 = times[np.maximum(last, 0)], times[nxt]
    frac = np.clip(m0 / np.where(m0 - m1 > 0, m0 - m1, 1.0), 0.0, 1.0)
    t = t0 + frac * (t1 - t0)
    t = np.where(last < 0, 0.0, t)
    return np.where(last >= S - 2, np.inf, t)


def _transient(
    net: Network,
    b_src: np.ndarray,
    red: np.ndarray,
    black: np.ndarray,
    instruments: InstrumentSpec,
    settle: bool = True,
) -> tuple[np.ndarray, np.ndarray, tuple[np.ndarray, StepState]]:
    """Backward Euler from all-discharged; the reading (R, S) at times (S,), last Jacobian.

    ``settle`` False: coarse steps throughout (only the final value is wanted).
    """
    R, n = b_src.shape
    m = net.Ac.shape[0]
    state = StepState(np.zeros((R, n)), np.zeros((R, net.Ad.shape[0])))
    x = np.zeros((R, m))
    full = np.zeros((R, n + 1))
    rows = np.arange(R)
    t, h = 0.0, FIRST_STEP_S
    readings, times = [], []
    near = (0.1 * instruments.diode_settle_s, 10 * instruments.diode_settle_s)
    coarse = COARSE_GROWTH
    if not settle:
        near, coarse = (np.inf, np.inf), FINAL_ONLY_GROWTH
    while t < SETTLE_HORIZON_S:
        x, _, _ = step(net, x, state, b_src, h, False)
        # Every step here has its own length, so the network's per-length matrices are never
        # reused; dropping them keeps memory at one step's worth for large batches.
        net._h_cache.clear()
        t += h
        full[:, 1:] = state.v
        readings.append(full[rows, red] - full[rows, black])
        times.append(t)
        growth = STEP_GROWTH if near[0] <= t <= near[1] else coarse
        h = (growth - 1.0) * t
    J, _ = newton(net, x, state, b_src, h)  # the Jacobian at the settled point
    return np.stack(readings, axis=1), np.array(times), (J, state)


def _junction(rows: Params, state: StepState) -> tuple[np.ndarray, np.ndarray]:
    """(R, k) each diode's junction current and its conductance, at the state's voltages."""
    e = np.exp(np.minimum(state.vj / rows.d_nvt, 80.0))
    return rows.d_is * (e - 1.0), rows.d_is * e / rows.d_nvt


def _part_current(
    rows: Params, state: StepState, part: np.ndarray, reverse: np.ndarray, net: Network
) -> np.ndarray:
    """(R,) current through the tested diode (junction and leakage) from the red lead."""
    r = np.arange(rows.batch)
    f, _ = _junction(rows, state)
    across = state.v @ net.Ad.T  # (R, k) anode − cathode
    i = f[r, part] + rows.d_gp[r, part] * across[r, part]
    return np.where(reverse, -i, i)


def _drop_sensitivity(
    rows: Params, state: StepState, net: Network, J: np.ndarray, red: np.ndarray, black: np.ndarray
) -> np.ndarray:
    """(R, k) ∂reading/∂(forward-drop shift of each diode), first order at the settled point.

    A drop shift δ moves a diode's branch current by −f·δ/(n·Vt·(1 + g·Rs)) at fixed node
    voltages (the saturation current scaled by e^(−δ/nVt), as ``response.linear_response``
    does); the node voltages answer through the Jacobian.
    """
    f, gj = _junction(rows, state)
    di = -f / (rows.d_nvt * (1.0 + gj * rows.d_rs))  # (R, k)
    Z = np.linalg.solve(J, -(net.Ad.T[None] * di[:, None, :]))  # (R, n, k)
    full = np.concatenate([np.zeros((rows.batch, 1, Z.shape[2])), Z], axis=1)
    r = np.arange(rows.batch)
    return full[r, red] - full[r, black]
