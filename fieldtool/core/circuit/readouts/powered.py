"""Readings taken with the board powered, each as its instrument reads it, for many variants.

Given the board's circuit, a batch of B variants (``Params``) and their solved periodic steady
state (one ``Period`` row per variant, no instrument on the board), ``powered_readouts``
predicts at each probe node and for each variant:

- ``ripple-pp``: peak to peak as a scope reads it through a 10× passive probe (10 MΩ ‖ about
  12 pF: common practice, no source). The probe's resistance is solved in place (it draws
  DC, like the voltmeter); its capacitance divides the AC part with the node's own capacitance
  (``waveform.shunt_divider`` at the drive frequency: on these boards a factor within 10⁻⁴
  of 1). Extremes are refined between time steps (``waveform``).
- ``ac-rms``: the RMS of the AC component as a true-RMS meter reads it. Its AC input is
  DC-blocked, so it draws no DC and is not solved in place; its input (1 MΩ ‖ 100 pF) divides
  each harmonic with the node's capacitance, and its bandwidth rolls each harmonic off at
  first order (``[meter] ac_bandwidth_hz``).
- ``current`` at ``supply``: the DC average the meter reads in series with the supply lead,
  solved with its burden resistance in series with the supply's source resistance (so the
  board sees the lower supply). Boards with no DC input have no such reading (NaN). And at
  ``drive``: a square driver's own supply rail (``current`` says how).
- ``dc-loaded``: the DC average the voltmeter reads at a node while a test load of the given
  resistance is clipped from the output node to ground, both solved in place.

The instrument-in-place variants are solved in one batch, each starting from its variant's
own steady state (the instrument is a small change from it), on the same time grid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params, stack
from fieldtool.core.circuit.readouts.current import (
    rail_amps,
    rail_sources,
    source_amps,
    supply_index,
    with_rail_burden,
)
from fieldtool.core.circuit.readouts.spread import tolerance_sigma, tolerance_steps
from fieldtool.core.circuit.readouts.waveform import (
    RESAMPLE_POINTS,
    edge_samples,
    first_order_rolloff,
    peak_to_peak,
    shunt_divider,
    true_rms,
)
from fieldtool.core.circuit.response import linear_response
from fieldtool.core.circuit.solver import Period, _take_period, period_grid, steady_state
from fieldtool.core.circuit.spec import InstrumentSpec, Profile

SUPPLY = "supply"


@dataclass(frozen=True)
class PoweredReadouts:
    """Predicted powered readings for B variants at P probe nodes (see the module docstring).

    Each ``*_sigma`` is the 1σ spread from part tolerances (``spread``), the instrument's own
    accuracy excluded (``spread.accuracy_sigma``); NaN where a solve did not converge.
    """

    nodes: tuple[str, ...]  # (P,) probe node names
    ripple_pp: np.ndarray  # (B, P) volts peak to peak, scope and probe in place
    ripple_sigma: np.ndarray  # (B, P)
    ac_rms: np.ndarray  # (B, P) volts, true-RMS meter on AC volts
    ac_sigma: np.ndarray  # (B, P)
    supply_amps: np.ndarray  # (B,) amps through the meter's burden; NaN without a DC input
    supply_sigma: np.ndarray  # (B,)
    rail_amps: np.ndarray  # (B,) a square driver's own rail, through the burden; else NaN
    rail_sigma: np.ndarray  # (B,)
    test_load_ohms: tuple[float, ...]  # (L,)
    dc_loaded: np.ndarray  # (B, L, P) volts, test load on the output, voltmeter on the node
    loaded_sigma: np.ndarray  # (B, L, P)
    converged: np.ndarray  # (B,) every solve of the variant converged


def node_admittance(circuit: Circuit, params: Params) -> tuple[np.ndarray, np.ndarray]:
    """(B, P) conductance and capacitance on each probe node, for the instruments' dividers.

    The capacitance of every capacitor with a terminal on the node, and the conductance of a
    source feeding it and of its loads (the supply node S0 has no capacitor, only its source).
    """
    probe = np.array(circuit.probe_nodes)
    on = (circuit.cap_nodes[:, :, None] == probe[None, None, :]).any(axis=1)  # (m, P)
    fed = np.array([[s.node == j for j in probe] for s in circuit.sources], dtype=float)
    g = params.s_g @ fed + params.g_shunt[:, probe - 1]
    return g, params.c_f @ on


def drive_hz(circuit: Circuit) -> float:
    """The drive frequency."""
    return 1.0 / circuit.period_s


def square_drive(circuit: Circuit) -> bool:
    """True where the drive is a square wave (its edges are corners of the waveforms)."""
    return any(s.kind.startswith("square") for s in circuit.sources)


def corners(circuit: Circuit, times: np.ndarray) -> np.ndarray:
    """(T,) samples on a drive edge, for the peak refinement."""
    return edge_samples(times, circuit.edge_fraction * circuit.period_s, square_drive(circuit))


def ac_gain(
    circuit: Circuit, g: np.ndarray, c: np.ndarray, instruments: InstrumentSpec
) -> np.ndarray:
    """(B, P, K) the AC meter's response to each harmonic at each node."""
    f = np.arange(1, RESAMPLE_POINTS // 2) * drive_hz(circuit)
    divider = shunt_divider(f, g, c, 1.0 / instruments.ac_input_ohms, instruments.ac_input_farads)
    return divider * first_order_rolloff(f, instruments.ac_bandwidth_hz)


def ac_rms_reading(
    circuit: Circuit, params: Params, period: Period, instruments: InstrumentSpec
) -> np.ndarray:
    """(B, P) what a true-RMS meter on AC volts reads at each probe node (no DC drawn)."""
    probe = np.array(circuit.probe_nodes) - 1
    wave = np.moveaxis(period.v[:, :, probe], 1, -1)  # (B, P, T)
    gain = ac_gain(circuit, *node_admittance(circuit, params), instruments)
    return true_rms(period.times, wave, gain)


def powered_readouts(
    circuit: Circuit,
    params: Params,
    period: Period,
    profile: Profile,
    test_load_ohms: tuple[float, ...] | None = None,
    steps: int = 80,
    spreads: bool = True,
) -> PoweredReadouts:
    """Every powered reading of every variant at every probe node (see the module docstring).

    Args:
        circuit: the board's network.
        params: B variants.
        period: their solved steady state, one row per variant, on ``period_grid(circuit,
            steps)`` (the instrument-in-place solves use the same grid and start from it).
        profile: the board (its instruments, voltmeter, tolerances and test loads).
        test_load_ohms: the test loads, each clipped from the output node to ground; None
            means the profile's ``[test_loads]``.
        steps: time steps a period, as ``period`` was solved.
        spreads: also the tolerance spreads (B·(c+3) more solves in the same batch, and a
            linear response of the current and test-load rows); without, they are NaN.
    """
    if test_load_ohms is None:
        test_load_ohms = tuple(t.ohms for t in profile.test_loads)
    times = period_grid(circuit, steps)
    if len(times) != len(period.times):
        raise ValueError(f"period has {len(period.times) - 1} steps, not {len(times) - 1}")
    unmetered_rail = rail_amps(circuit, period, params, np.arange(params.batch))
    plan = _Plan.of(circuit, params, profile, tuple(test_load_ohms), spreads, unmetered_rail)
    start = _loaded_starts(circuit, params, period, plan, test_load_ohms, steps)
    ss = steady_state(
        circuit,
        plan.rows,
        x0=start.x_start,
        steps_per_period=steps,
        guess=start,
        max_iterations=40,  # a probe on a high-impedance node can move it far (see README)
        fallback_periods=0,
    )
    per, bad = ss.period, ~ss.converged
    B = params.batch
    ok = np.ones(B, dtype=bool)
    np.logical_and.at(ok, plan.variant, ss.converged)
    probe = np.array(circuit.probe_nodes) - 1
    ripple = scope_ripple(circuit, params, per, plan.scope, profile.instruments)
    amps = np.full(B, np.nan)
    if plan.supply is not None:
        amps = source_amps(
            per, plan.rows, plan.burdened, circuit.sources[plan.supply].node, plan.supply
        )
    rail = np.full(B, np.nan)
    if plan.railed.size:
        rail = rail_amps(circuit, per, plan.rows, plan.railed)
    dc_loaded = node_average(per, plan.loaded, probe[None, None, :])
    ac = ac_rms_reading(circuit, params, period, profile.instruments)
    sig = _Sigmas.none(B, len(probe), len(test_load_ohms))
    if spreads:
        sig.ripple, sig.ac = _waveform_sigmas(circuit, params, period, profile, per, plan)
        sig.supply, sig.loaded = _linear_sigmas(circuit, profile, per, plan, steps)
        if plan.railed.size:
            moved = rail_amps(circuit, per, plan.rows, plan.nudged.ravel()).reshape(B, -1)
            sig.rail = np.sqrt(((moved - unmetered_rail[:, None]) ** 2).sum(axis=1))
        nudge_failed = bad[plan.nudged].any(axis=1)[:, None]  # a spread needs every nudge
        sig.ripple[np.broadcast_to(nudge_failed, sig.ripple.shape)] = np.nan
        sig.ac[np.broadcast_to(nudge_failed, sig.ac.shape)] = np.nan
    pairs = (
        (ripple, plan.scope),
        (amps, plan.burdened),
        (rail, plan.railed),
        (sig.rail, plan.railed),
        (dc_loaded, plan.loaded),
        (sig.supply, plan.burdened),
        (sig.loaded, plan.loaded),
    )
    for arr, idx in pairs:
        if idx.size and arr.size:
            arr[bad[idx]] = np.nan
    return PoweredReadouts(
        nodes=tuple(circuit.name(i) for i in circuit.probe_nodes),
        ripple_pp=ripple,
        ripple_sigma=sig.ripple,
        ac_rms=ac,
        ac_sigma=sig.ac,
        supply_amps=amps,
        supply_sigma=sig.supply,
        rail_amps=rail,
        rail_sigma=sig.rail,
        test_load_ohms=tuple(test_load_ohms),
        dc_loaded=dc_loaded,
        loaded_sigma=sig.loaded,
        converged=ok,
    )


def _loaded_starts(
    circuit: Circuit,
    params: Params,
    period: Period,
    plan: _Plan,
    test_load_ohms: tuple[float, ...],
    steps: int,
) -> Period:
    """Each row's starting period: its variant's, or under a test load the loaded board's.

    A test load can move the board far from its unloaded state (a 220 kΩ load on a board
    built for 50 MΩ); the loaded boards (B·L, no meter) are solved first, with more shooting
    iterations, and the voltmeter's placements on each start from them.
    """
    start = _take_period(period, plan.variant)
    B, L, P = plan.loaded.shape
    if L == 0:
        return start
    variant = np.repeat(np.arange(B), L)
    rows = params.take(variant).copy()
    rows.g_shunt[:, circuit.output_node - 1] += np.tile(1.0 / np.asarray(test_load_ohms), B)
    loaded = steady_state(
        circuit,
        rows,
        x0=period.x_start[variant],
        steps_per_period=steps,
        guess=_take_period(period, variant),
        max_iterations=40,
        fallback_periods=0,
    )
    ok = loaded.converged  # (B·L,): where not, the voltmeter rows start from unloaded
    into = plan.loaded.reshape(B * L, P)[ok].ravel()
    src = np.repeat(np.flatnonzero(ok), P)
    fields = {}
    for name in ("x_start", "x_end", "v", "x", "src", "monodromy", "vj"):
        value = getattr(start, name).copy()
        value[into] = getattr(loaded.period, name)[src]
        fields[name] = value
    return Period(times=start.times, newton_iterations=0, **fields)


def scope_ripple(
    circuit: Circuit, params: Params, per: Period, scope: np.ndarray, instruments: InstrumentSpec
) -> np.ndarray:
    """(B, P) peak to peak of the rows ``scope`` (B, P) (the probe on each node in turn)."""
    probe = np.array(circuit.probe_nodes) - 1
    ripple = peak_to_peak(per.times, per.v[scope, :, probe[None, :]], corners(circuit, per.times))
    f0 = np.array([drive_hz(circuit)])
    g_node, c_node = node_admittance(circuit, params)
    return ripple * shunt_divider(f0, g_node, c_node, 0.0, instruments.probe_farads)[..., 0]


def node_average(per: Period, rows: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """Period average of node ``nodes`` (0-based) in rows ``rows`` (broadcast together)."""
    rows, nodes = np.broadcast_arrays(rows, nodes)
    h = np.diff(per.times)
    wave = per.v[rows.ravel(), :, nodes.ravel()]  # (N, T)
    return ((wave * h).sum(axis=1) / per.times[-1]).reshape(rows.shape)


@dataclass
class _Sigmas:
    ripple: np.ndarray
    ac: np.ndarray
    supply: np.ndarray
    rail: np.ndarray
    loaded: np.ndarray

    @classmethod
    def none(cls, B: int, P: int, L: int) -> _Sigmas:
        nan = np.nan
        return cls(
            np.full((B, P), nan),
            np.full((B, P), nan),
            np.full(B, nan),
            np.full(B, nan),
            np.full((B, L, P), nan),
        )


@dataclass(frozen=True)
class _Plan:
    """The rows of the one batch solve and where each kind's rows are."""

    rows: Params
    variant: np.ndarray  # (R,) the variant each row belongs to
    supply: int | None
    scope: np.ndarray  # (B, P) the scope on each probe node
    burdened: np.ndarray  # (B,) or (0,): the current meter in the supply lead
    railed: np.ndarray  # (B,) or (0,): the current meter in a square driver's rail
    loaded: np.ndarray  # (B, L, P) test load on, voltmeter on each node
    nudged: np.ndarray  # (B, d) or (B, 0): one tolerance nudged per row

    @classmethod
    def of(
        cls,
        circuit: Circuit,
        params: Params,
        profile: Profile,
        test_load_ohms: tuple[float, ...],
        spreads: bool,
        rail: np.ndarray,
    ) -> _Plan:
        B = params.batch
        probe = np.array(circuit.probe_nodes) - 1
        P, L = len(probe), len(test_load_ohms)
        supply = supply_index(circuit)
        inst = profile.instruments
        blocks: list[Params] = []
        variants: list[np.ndarray] = []

        def block(rows: Params, variant: np.ndarray) -> np.ndarray:
            start = sum(len(v) for v in variants)
            blocks.append(rows)
            variants.append(variant)
            return start + np.arange(len(variant))

        v = np.repeat(np.arange(B), P)
        rows = params.take(v).copy()
        rows.g_shunt[np.arange(len(v)), np.tile(probe, B)] += 1.0 / inst.probe_ohms
        scope = block(rows, v).reshape(B, P)
        burdened = np.zeros(0, dtype=np.intp)
        if supply is not None:
            rows = params.copy()
            rows.s_g[:, supply] = 1.0 / (1.0 / rows.s_g[:, supply] + inst.burden_ohms)
            burdened = block(rows, np.arange(B))
        railed = np.zeros(0, dtype=np.intp)
        if rail_sources(circuit):
            rows = with_rail_burden(circuit, params, rail, inst.burden_ohms)
            railed = block(rows, np.arange(B))
        v = np.repeat(np.arange(B), L * P)
        rows = params.take(v).copy()
        r = np.arange(len(v))
        rows.g_shunt[r, circuit.output_node - 1] += np.tile(
            np.repeat(1.0 / np.asarray(test_load_ohms, dtype=float), P), B
        )
        rows.g_shunt[r, np.tile(probe, B * L)] += 1.0 / profile.meter_ohms
        loaded = block(rows, v).reshape(B, L, P)
        nudged = np.zeros((B, 0), dtype=np.intp)
        if spreads:
            rows, d = tolerance_steps(circuit, params, profile)
            nudged = block(rows, np.repeat(np.arange(B), d)).reshape(B, d)
        return cls(
            stack(blocks),
            np.concatenate(variants),
            supply,
            scope,
            burdened,
            railed,
            loaded,
            nudged,
        )


def _waveform_sigmas(
    circuit: Circuit,
    params: Params,
    period: Period,
    profile: Profile,
    per: Period,
    plan: _Plan,
) -> tuple[np.ndarray, np.ndarray]:
    """Ripple and AC spreads (B, P) by forward differences over the nudged rows."""
    B, d = plan.nudged.shape
    probe = np.array(circuit.probe_nodes) - 1
    cut = corners(circuit, per.times)
    rows = plan.nudged.ravel()
    moved = np.moveaxis(per.v[rows][:, :, probe], 1, -1).reshape(B, d, len(probe), -1)
    base = np.moveaxis(period.v[:, :, probe], 1, -1)[:, None]  # (B, 1, P, T)
    d_ripple = peak_to_peak(per.times, moved, cut) - peak_to_peak(per.times, base, cut)
    g, c = node_admittance(circuit, params)
    gain = ac_gain(circuit, g, c, profile.instruments)  # (B, P, K)
    d_ac = true_rms(per.times, moved, gain[:, None]) - true_rms(per.times, base, gain[:, None])
    return np.sqrt((d_ripple**2).sum(axis=1)), np.sqrt((d_ac**2).sum(axis=1))


def _linear_sigmas(
    circuit: Circuit, profile: Profile, per: Period, plan: _Plan, steps: int
) -> tuple[np.ndarray, np.ndarray]:
    """Supply-current (B,) and test-load (B, L, P) spreads through the linear response."""
    B, L, P = plan.loaded.shape
    rows = np.concatenate([plan.burdened, plan.loaded.ravel()])
    resp = linear_response(circuit, plan.rows.take(rows), per.x_start[rows], steps)
    supply_sigma = np.full(B, np.nan)
    nb = len(plan.burdened)
    if plan.supply is not None:
        s = plan.supply
        j = circuit.probe_nodes.index(circuit.sources[s].node)
        g = plan.rows.s_g[plan.burdened, s]
        v_s = plan.rows.s_high[plan.burdened, s]
        supply_sigma = tolerance_sigma(
            profile,
            circuit,
            -g[:, None] * resp.d_cap[:nb, j],
            -g[:, None] * resp.d_diode[:nb, j],
            -g * resp.d_drive[:nb, j],
            g * (v_s - resp.d_supply[:nb, j]),
        )
    r = np.arange(nb, len(rows))
    j = np.tile(np.arange(P), B * L)
    loaded_sigma = tolerance_sigma(
        profile,
        circuit,
        resp.d_cap[r, j],
        resp.d_diode[r, j],
        resp.d_drive[r, j],
        resp.d_supply[r, j],
    )
    return supply_sigma, loaded_sigma.reshape(B, L, P)


def load_watts(output_volts: float, ohms: float) -> float:
    """The power a test load takes at the expected output: V²/R."""
    return output_volts**2 / ohms
