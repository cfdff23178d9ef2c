"""The fault dictionary: what every node reads, as the meter reads it, under every hypothesis.

Healthy plus every single fault of the catalog at every severity of its grid is one variant of
the board; all variants run through the solver together (Bandler & Salama, Proc. IEEE 73(8),
1985: simulate before test). For each variant and probe node the dictionary keeps

- ``mean``: the DC reading with the meter's input resistance on that node. Where the meter
  moves the node by under 1 % this is the Thevenin correction v̄/(1 + R/Rm) from the linear
  response; where it moves it more (nodes left floating by an open part) the variant is solved
  again with the meter on that node, because there the meter decides the reading.
- ``sigma``: the normal spread of that reading from part tolerances, first order (capacitor
  tolerance, diode forward-drop spread, a common temperature shift of every diode, drive and
  supply amplitude), plus a model floor and, on meter-dominated nodes, a drift allowance.
- ``ripple``: peak-to-peak over a period.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params, build_circuit, stack
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.response import Response, linear_response
from fieldtool.core.circuit.solver import steady_state
from fieldtool.core.circuit.staged import staged_steady_state
from fieldtool.core.diagnosis.faults import Hypothesis, apply_fault, catalog
from fieldtool.core.errors import SolverError

DICTIONARY_VERSION = 4  # 4: no hypothesis that cannot differ from healthy; grids in range
STEPS_PER_PERIOD = 40
METER_SOLVE_FRACTION = 0.01  # meter loading above this → solve with the meter in place

# Spreads. A tolerance printed as ±t is read as a rectangular distribution, σ = t/√3
# (JCGM 100:2008, GUM §4.3.7).
RECT = 1.0 / math.sqrt(3.0)
DIODE_VF_SIGMA = 0.015  # V, part-to-part forward-drop spread (common practice, no source)
TEMPCO_V_PER_K = -0.002  # V/K forward-drop temperature coefficient (Sedra & Smith)
TEMP_SPAN_K = 10.0  # ± field temperature uncertainty around the profile's (common practice)
MODEL_FLOOR = 0.005  # relative: the solver agrees with ngspice within 0.5 % (tests/core)
MODEL_FLOOR_FAULT = 0.01  # faults with large currents (shorts) resolve coarser in time
MODEL_FLOOR_V = 0.005
METER_SOLVE_ITERATIONS = 10
METER_SOLVE_STEPS = 16  # floating nodes move slowly; a coarse grid reads them as well
METER_SOLVE_TOL = 1e-4
FLOAT_SHARE = 0.5  # of the meter's pull on a floating node, allowed as drift (see module doc)
RIPPLE_SHARE = 0.25  # relative spread of a ripple reading (common practice, no source)


@dataclass(frozen=True)
class Band:
    """An expected reading and its normal range (about 95 %, meter accuracy included)."""

    expected: float
    low: float
    high: float
    sigma: float

    def contains(self, volts: float) -> bool:
        """True when a reading lies inside the band."""
        return self.low <= volts <= self.high


@dataclass(frozen=True)
class FaultDictionary:
    """Every hypothesis's expected as-read volts, spread and ripple at every probe node."""

    profile: Profile
    nodes: tuple[str, ...]
    labels: dict[str, str]
    hypotheses: tuple[Hypothesis, ...]
    row_hypothesis: np.ndarray  # (R,) index into hypotheses
    row_severity: np.ndarray  # (R,) severity (nan when the mode has none)
    mean: np.ndarray  # (R, P) as-read DC volts
    sigma: np.ndarray  # (R, P) spread from tolerances and model (1σ), meter accuracy excluded
    ripple: np.ndarray  # (R, P) peak-to-peak volts
    unloaded: np.ndarray  # (R, P) DC volts with no meter on the board
    meter_solved: np.ndarray  # (R, P) bool: the meter decides this reading
    failed: tuple[str, ...] = ()  # fault specs that did not converge (left out, said plainly)

    def node_index(self, node: str) -> int:
        """Column of a probe node."""
        return self.nodes.index(node)

    def meter_sigma(self, volts: np.ndarray | float) -> np.ndarray:
        """1σ of the meter's own error at a reading: its accuracy as a rectangular bound."""
        p = self.profile
        return (np.abs(volts) * p.meter_percent / 100.0 + p.meter_volts) * RECT

    def rows_of(self, key: str) -> np.ndarray:
        """Row indices of one hypothesis."""
        h = next(i for i, hyp in enumerate(self.hypotheses) if hyp.key == key)
        return np.flatnonzero(self.row_hypothesis == h)

    def band(self, node: str, key: str = "healthy") -> Band:
        """Expected reading and its ~95 % range under one hypothesis (default healthy)."""
        j = self.node_index(node)
        rows = self.rows_of(key)
        mu = self.mean[rows, j]
        s = np.sqrt(self.sigma[rows, j] ** 2 + self.meter_sigma(mu) ** 2)
        low, high = float((mu - 2 * s).min()), float((mu + 2 * s).max())
        centre = float(mu[0]) if len(rows) == 1 else float(np.median(mu))
        return Band(centre, low, high, float(s.max()))


def profile_variants(profile: Profile) -> tuple[Circuit, Params, tuple[Hypothesis, ...], list]:
    """The board's circuit, one Params row per (hypothesis, severity), and the row labels."""
    circuit, nominal = build_circuit(profile)
    hyps = catalog(profile, circuit)
    rows, labels = [], []
    for h_index, hyp in enumerate(hyps):
        for severity, fault in zip(hyp.severities, hyp.faults(), strict=True):
            params = nominal if fault is None else apply_fault(circuit, nominal, fault, profile)
            rows.append(params)
            labels.append((h_index, severity, fault))
    return circuit, stack(rows), hyps, labels


def build(
    profile: Profile,
    progress: Callable[[int, int], None] | None = None,
    steps: int = STEPS_PER_PERIOD,
) -> FaultDictionary:
    """Solve every variant of the board and assemble its dictionary.

    ``progress(done, total)`` is called as variants converge (the first 80 % of the work) and
    as the meter-dominated readings are solved (the rest).
    """
    circuit, params, hyps, labels = profile_variants(profile)

    def base_progress(done: int, total: int) -> None:
        if progress:
            progress(int(80 * done / total), 100)

    ss = staged_steady_state(circuit, params, steps, progress=base_progress)
    if not ss.converged[0]:
        raise SolverError(f"{profile.path}: the healthy board's steady state did not converge")
    ok = ss.converged
    resp = linear_response(circuit, params, ss.period.x_start, steps)
    pull = resp.thevenin_ohms / profile.meter_ohms
    mean = resp.avg / (1.0 + pull)
    ripple = resp.ripple.copy()
    solved = (np.abs(pull) > METER_SOLVE_FRACTION) & ok[:, None]
    sigma = _tolerance_sigma(profile, circuit, resp) / (1.0 + np.abs(pull))
    x_start = ss.period.x_start
    unsure = _solve_with_meter(circuit, params, profile, x_start, solved, mean, ripple, steps)
    if progress:
        progress(100, 100)
    row_hyp = np.array([r[0] for r in labels])
    sigma = np.sqrt(sigma**2 + _severity_sigma(mean, row_hyp, ok) ** 2)
    sigma = _finish_sigma(sigma, mean, resp.avg, solved, unsure, row_hyp)
    failed = tuple(labels[r][2].spec(profile) for r in np.flatnonzero(~ok) if labels[r][2])
    return FaultDictionary(
        profile=profile,
        nodes=tuple(circuit.name(i) for i in circuit.probe_nodes),
        labels=dict(circuit.labels),
        hypotheses=hyps,
        row_hypothesis=row_hyp[ok],
        row_severity=np.array([r[1] for r in labels], dtype=float)[ok],
        mean=mean[ok],
        sigma=sigma[ok],
        ripple=ripple[ok],
        unloaded=resp.avg[ok],
        meter_solved=solved[ok],
        failed=failed,
    )


def _tolerance_sigma(profile: Profile, circuit: Circuit, resp: Response) -> np.ndarray:
    """First-order 1σ spread of each probe node's average from the parts' tolerances."""
    c = resp.d_cap.shape[2]
    caps = [profile.capacitor_overrides.get(r, profile.capacitor) for r in circuit.cap_refs[:c]]
    cap_sigma = np.array([spec.tolerance for spec in caps]) * RECT
    var = ((resp.d_cap * cap_sigma) ** 2).sum(axis=2)
    var += ((resp.d_diode * DIODE_VF_SIGMA) ** 2).sum(axis=2)
    temp = resp.d_diode.sum(axis=2) * TEMPCO_V_PER_K * TEMP_SPAN_K * RECT
    var += temp**2
    amp = profile.drive_tolerance * RECT
    var += (resp.d_drive * amp) ** 2 + (resp.d_supply * amp) ** 2
    return np.sqrt(var)


def _solve_with_meter(
    circuit: Circuit,
    params: Params,
    profile: Profile,
    x_start: np.ndarray,
    todo: np.ndarray,
    mean: np.ndarray,
    ripple: np.ndarray,
    steps: int,
) -> np.ndarray:
    """Solve the (variant, node) pairs the meter pulls hard with the meter in place.

    Such nodes hang on leakage and move slowly (minutes), so their steady state is only one
    possible reading; pairs that do not settle within a few shooting iterations keep the
    linear estimate and are returned as unsure (their band is widened).
    """
    unsure = np.zeros_like(todo)
    pairs = np.argwhere(todo)
    if len(pairs) == 0:
        return unsure
    probe = np.array(circuit.probe_nodes) - 1
    p = params.take(pairs[:, 0]).copy()
    nodes = probe[pairs[:, 1]]
    p.g_shunt[np.arange(len(pairs)), nodes] += 1.0 / profile.meter_ohms
    ss = steady_state(
        circuit,
        p,
        x0=x_start[pairs[:, 0]],
        steps_per_period=METER_SOLVE_STEPS,
        tol=METER_SOLVE_TOL,
        max_iterations=METER_SOLVE_ITERATIONS,
        fallback_periods=0,
        damped=True,
    )
    h = np.diff(ss.period.times)
    wave = ss.period.v[np.arange(len(pairs)), :, nodes]  # (pairs, T)
    avg = (wave * h).sum(axis=1) / ss.period.times[-1]
    good = ss.converged
    mean[pairs[good, 0], pairs[good, 1]] = avg[good]
    ripple[pairs[good, 0], pairs[good, 1]] = (wave.max(axis=1) - wave.min(axis=1))[good]
    unsure[pairs[~good, 0], pairs[~good, 1]] = True
    return unsure


def _severity_sigma(mean: np.ndarray, row_hyp: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Spread for severities between grid points: a quarter of the step to a neighbour.

    A graded mode is solved at a few severities only; a board between two of them reads
    between their predictions, so each row's spread covers half-way to its farther neighbour
    at two sigma.
    """
    out = np.zeros_like(mean)
    for h in np.unique(row_hyp):
        rows = np.flatnonzero((row_hyp == h) & ok)
        if len(rows) < 2:
            continue
        step = np.abs(np.diff(mean[rows], axis=0))  # (n−1, P)
        left = np.vstack([np.zeros((1, mean.shape[1])), step])
        right = np.vstack([step, np.zeros((1, mean.shape[1]))])
        out[rows] = 0.25 * np.maximum(left, right)
    return out


def _finish_sigma(
    sigma: np.ndarray,
    mean: np.ndarray,
    unloaded: np.ndarray,
    solved: np.ndarray,
    unsure: np.ndarray,
    row_hyp: np.ndarray,
) -> np.ndarray:
    """Add the model floor and the floating-node drift; never narrower than healthy.

    A node the meter pulls hard reads anywhere between its value before the probe landed and
    its value with the meter in place, depending on how long the probe has been there (the
    meter's input resistance times the node's capacitance is seconds to minutes); half that
    span is added as spread. Where the meter-in-place value could not be found, the spread is
    the node's whole value.
    """
    floor = np.where(row_hyp[:, None] == 0, MODEL_FLOOR, MODEL_FLOOR_FAULT)
    s = np.sqrt(sigma**2 + (floor * np.abs(mean)) ** 2 + MODEL_FLOOR_V**2)
    drift = np.where(solved, FLOAT_SHARE * np.abs(unloaded - mean), 0.0)
    drift = np.where(unsure, np.abs(unloaded), drift)
    s = np.sqrt(s**2 + drift**2)
    # A faulted board carries every tolerance of the healthy one and more: its spread is never
    # narrower, so a reading at the healthy value never favours a fault over healthy.
    return np.maximum(s, s[row_hyp == 0][0][None, :])
