"""What every node of a board should read, as the meter reads it, and the board's figures."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import (
    Change,
    Circuit,
    Params,
    build_circuit,
    scaled_load,
    stack,
    with_meter,
)
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.solver import (
    Network,
    Period,
    StepState,
    initial_state,
    sink_current,
    steady_state,
    step,
    transient,
)
from fieldtool.core.circuit.staged import staged_steady_state
from fieldtool.core.errors import SolverError


@dataclass(frozen=True)
class NodeExpectation:
    """Expected reading at one node."""

    node: str
    label: str
    volts: float  # DC average with the meter on this node
    unloaded_volts: float  # DC average with no meter on the board
    ripple_vpp: float
    min_volts: float
    max_volts: float

    @property
    def loading_volts(self) -> float:
        """How much the meter pulls this node."""
        return self.unloaded_volts - self.volts


@dataclass(frozen=True)
class Expectation:
    """The board's expected readings and figures at one operating point."""

    profile: Profile
    nodes: tuple[NodeExpectation, ...]
    output_node: str
    output_volts: float
    output_ripple_vpp: float
    supply_current_a: float
    drive_current_a: float
    input_power_w: float
    output_power_w: float
    efficiency: float
    output_ohms: float
    startup_s: float | None
    discharge_s: float
    safe_volts: float
    stored_energy_j: float
    energy_by_part: dict[str, float]
    converged: bool
    residual_volts: float
    shooting_iterations: int

    def node(self, name: str) -> NodeExpectation:
        """Expected reading at a node by name."""
        for n in self.nodes:
            if n.node == name:
                return n
        raise KeyError(name)

    def loading_matters(self, node: NodeExpectation) -> bool:
        """True where the meter moves the reading by more than its own accuracy."""
        p = self.profile
        accuracy = abs(node.volts) * p.meter_percent / 100 + p.meter_volts
        return abs(node.loading_volts) > accuracy


def period_average(period: Period) -> np.ndarray:
    """Time average of node voltages (B, n) with the integration rule's weights."""
    h = np.diff(period.times)
    return (period.v * h[None, :, None]).sum(axis=1) / period.times[-1]


def solve_variants(
    circuit: Circuit, params: Params, meter_ohms: float, steps: int = 80
) -> tuple[np.ndarray, np.ndarray, object]:
    """As-read DC average and ripple at every probe node for each variant.

    Runs one steady state per (variant, probed node) with the meter on that node, all in one
    batch. Returns (volts (B, P), ripple (B, P), steady state of the meter-free batch).
    """
    B = params.batch
    P = len(circuit.probe_nodes)
    metered = stack([with_meter(circuit, params.take([b]), meter_ohms) for b in range(B)])
    ss = steady_state(circuit, stack([params, metered]), steps_per_period=steps)
    if not ss.converged.all():
        worst = float(ss.residual.max())
        raise SolverError(
            f"periodic steady state not reached (residual {worst:.3g} V after "
            f"{ss.shooting_iterations} shooting iterations); try a finer profile or report it"
        )
    avg = period_average(ss.period)
    idx = np.array(circuit.probe_nodes) - 1
    rows = B + np.arange(B * P).reshape(B, P)
    volts = avg[rows, idx[None, :]]
    v_probe = ss.period.v[rows, :, idx[None, :]]  # (B, P, T)
    ripple = v_probe.max(axis=-1) - v_probe.min(axis=-1)
    return volts, ripple, ss


def expect(profile: Profile, steps: int = 80, fault: Change | None = None) -> Expectation:
    """Expected readings and figures for a profile at its rated load, optionally faulted.

    ``fault`` is any change to the board's netlist (a catalogued fault, for one).
    """
    circuit, params = build_circuit(profile)
    if fault is not None:
        params = fault.apply(circuit, params, profile)
    heavier = scaled_load(circuit, params, 1.25)
    metered = with_meter(circuit, params, profile.meter_ohms)
    batch = stack([params, heavier, metered])
    # Row 0 (the board itself) is solved first; the heavier load and the meter on each node
    # are small changes from it and start from its waveforms (fieldtool.core.circuit.staged).
    start = None
    if fault is not None:
        # A faulted board can be far from any formula: start from the healthy board.
        healthy = steady_state(circuit, build_circuit(profile)[1], steps_per_period=steps)
        start = healthy.period if healthy.converged[0] else None
        alone = staged_steady_state(circuit, params, steps, start=start)
        if alone.converged[0]:
            start = alone.period
    ss = staged_steady_state(circuit, batch, steps, start=start)
    if not ss.converged.all():
        raise SolverError(
            f"{profile.path}: periodic steady state not reached (residual "
            f"{float(ss.residual.max()):.3g} V); the profile may describe an unstable board"
        )
    per = ss.period
    avg = period_average(per)
    h = np.diff(per.times)
    T = per.times[-1]
    o = circuit.output_node - 1
    idx = np.array(circuit.probe_nodes) - 1
    nodes = []
    for j, i in enumerate(idx):
        wave = per.v[0, :, i]
        nodes.append(
            NodeExpectation(
                node=circuit.node_names[i],
                label=circuit.labels.get(circuit.node_names[i], ""),
                volts=float(avg[2 + j, i]),
                unloaded_volts=float(avg[0, i]),
                ripple_vpp=float(per.v[2 + j, :, i].max() - per.v[2 + j, :, i].min()),
                min_volts=float(wave.min()),
                max_volts=float(wave.max()),
            )
        )
    # Source currents: i = g (v_source − v_node); the supply's average, the drive's sourced part.
    currents = []
    for s_i, s in enumerate(circuit.sources):
        i_t = params.s_g[0, s_i] * (per.src[0, :, s_i] - per.v[0, :, s.node - 1])
        currents.append((s, i_t))
    supply_a = drive_a = p_in = 0.0
    for s, i_t in currents:
        src_v = per.src[0, :, circuit.sources.index(s)]
        p_in += float((src_v * i_t * h).sum() / T)
        if s.kind == "dc":
            supply_a += float((i_t * h).sum() / T)
        else:
            drive_a += float((np.maximum(i_t, 0.0) * h).sum() / T)
    v_out = float(avg[0, o])
    i_out = _output_current(params, 0, o, v_out)
    v_out2 = float(avg[1, o])
    i_out2 = _output_current(heavier, 0, o, v_out2)
    r_out = abs(v_out - v_out2) / abs(i_out2 - i_out) if i_out2 != i_out else math.nan
    p_out = abs(v_out) * i_out
    energy = 0.5 * params.c_f[0] * np.abs(per.x[0]).max(axis=0) ** 2
    parts = {r: float(e) for r, e in zip(circuit.cap_refs, energy, strict=True)}
    discharge = discharge_time(circuit, params, per.x_end[0], profile.safe_volts)
    return Expectation(
        profile=profile,
        nodes=tuple(nodes),
        output_node=circuit.node_names[o],
        output_volts=v_out,
        output_ripple_vpp=float(per.v[0, :, o].max() - per.v[0, :, o].min()),
        supply_current_a=supply_a,
        drive_current_a=drive_a,
        input_power_w=p_in,
        output_power_w=p_out,
        efficiency=p_out / p_in if p_in > 0 else math.nan,
        output_ohms=r_out,
        startup_s=startup_time(circuit, params, per),
        discharge_s=discharge,
        safe_volts=profile.safe_volts,
        stored_energy_j=float(energy.sum()),
        energy_by_part=parts,
        converged=bool(ss.converged.all()),
        residual_volts=float(ss.residual.max()),
        shooting_iterations=ss.shooting_iterations,
    )


def _output_current(params: Params, row: int, o: int, v_out: float) -> float:
    sink, _ = sink_current(params.i_load[row, o], np.float64(v_out))
    return abs(params.g_shunt[row, o] * v_out + float(sink))


def startup_time(circuit: Circuit, params: Params, per: Period) -> float | None:
    """Time from all-discharged to 90 % of the final output (an estimate).

    The first periods, where the diodes conduct hardest, are simulated in full; from there
    the linearised period map x_{k+1} − x* ≈ M (x_k − x*) (M the steady-state monodromy)
    carries on. Returns None when 90 % is not reached in 10⁵ periods.
    """
    M = per.monodromy[0]
    x_star = per.x_start[0]
    o = circuit.output_node - 1
    final = float(period_average(per)[0, o])
    target = 0.9 * abs(final)
    period = circuit.period_s
    full = transient(circuit, params.take([0]), np.zeros((1, len(x_star))), STARTUP_FULL_PERIODS)
    for k, p in enumerate(full):
        if abs(period_average(p)[0, o]) >= target:
            return (k + 1) * period
    # A period's output average moves with the capacitors that stack up to the output node.
    gain = _output_sensitivity(circuit, o)
    e = full[-1].x_end[0] - x_star
    for k in range(len(full), 100_000):
        if abs(final + gain @ e) >= target:
            return (k + 1) * period
        e = M @ e
    return None


STARTUP_FULL_PERIODS = 20


def _output_sensitivity(circuit: Circuit, o: int) -> np.ndarray:
    """Signs of the capacitor voltages summed along a capacitor path from ground to node o."""
    target = o + 1
    edges: dict[int, list[tuple[int, int, float]]] = {}
    for j, (a, b) in enumerate(circuit.cap_nodes):
        edges.setdefault(int(b), []).append((int(a), j, 1.0))  # b → a adds x_j
        edges.setdefault(int(a), []).append((int(b), j, -1.0))
    seen = {0: np.zeros(len(circuit.cap_nodes))}
    frontier = [0]
    while frontier:
        node = frontier.pop(0)
        for nxt, j, sign in edges.get(node, []):
            if nxt not in seen and nxt not in {s.node for s in circuit.sources}:
                g = seen[node].copy()
                g[j] += sign
                seen[nxt] = g
                frontier.append(nxt)
    return seen.get(target, np.zeros(len(circuit.cap_nodes)))


def discharge_time(circuit: Circuit, params: Params, x_on: np.ndarray, safe_volts: float) -> float:
    """Seconds after power-off until every node is below ``safe_volts`` in magnitude.

    Supply and drive go to 0 V through their source resistances; the capacitors discharge
    through the load, the bleeder, the diodes and their own leakage. Backward Euler with steps
    growing geometrically from one drive period.
    """
    p = params.take([0]).copy()
    p.s_high[:] = 0.0
    p.s_low[:] = 0.0
    p.i_load[:] = 0.0  # a current-sink load stops with its supply
    net = Network(circuit, p)
    state = StepState(np.zeros((1, circuit.n)), np.zeros((1, len(circuit.diode_refs))))
    x = x_on[None, :].copy()
    b0 = np.zeros((1, circuit.n))  # sources off; a constant-current load stops too
    # Settle the node voltages at t = 0+ with a tiny step.
    h = circuit.period_s * 1e-3
    x, _, _ = step(net, x, state, b0, h, False)
    t = h
    peak = float(np.abs(state.v).max())
    if peak < safe_volts:
        return 0.0
    h = circuit.period_s
    prev_t, prev_peak = t, peak
    while t < 1e7:
        x, _, _ = step(net, x, state, b0, h, False)
        t += h
        peak = float(np.abs(state.v).max())
        if peak < safe_volts:
            # log-linear interpolation between the last two points
            if prev_peak > safe_volts and peak > 0:
                frac = math.log(prev_peak / safe_volts) / math.log(prev_peak / peak)
                return prev_t + frac * (t - prev_t)
            return t
        prev_t, prev_peak = t, peak
        h *= 1.1
    return math.inf


def expected_initial_state(profile: Profile) -> np.ndarray:
    """Ideal-formula capacitor voltages (for external simulators' initial conditions)."""
    circuit, params = build_circuit(profile)
    return initial_state(circuit, params)
