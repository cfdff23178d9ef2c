"""The fault dictionary: what every available measurement reads, as its instrument reads it,
under every hypothesis.

Healthy plus every single fault of the catalog at every severity of its grid is one variant of
the board; all variants run through the solver together (Bandler & Salama, Proc. IEEE 73(8),
1985: simulate before test). For each variant (a row) the dictionary keeps the as-read mean
and the 1σ spread from part tolerances and the model (the instrument's own accuracy is added
by the ranking, ``readouts.spread.accuracy_sigma``) of every measurement channel the board
allows:

- ``dc`` at each probe node: the DC reading with the meter's input resistance on that node.
  Where the meter moves the node by under 1 % this is the Thevenin correction v̄/(1 + R/Rm)
  from the linear response; where it moves it more (nodes left floating by an open part) the
  variant is solved again with the meter on that node, because there the meter decides the
  reading. The spread: capacitor tolerance, diode forward-drop spread, a common temperature
  shift of every diode, drive and supply amplitude (first order), a model floor, the step
  between severity grid points, and on meter-dominated nodes a drift allowance.
- ``ripple-pp`` (scope) and ``ac-rms`` (true-RMS meter) at each node, from the solved period
  itself (``readouts.powered.scope_ripple``, ``ac_rms_reading``: no second steady state; the
  scope probe's 10 MΩ is taken as the voltmeter's pull, solved in place where that matters).
  Their tolerance spread is the healthy board's, relative, found by finite differences over the
  tolerances once (``readouts.spread.tolerance_steps``) and applied to every row: the parts'
  tolerances scale a ripple whatever its level (first order).
- ``current`` at ``supply`` (the supply lead's average through the meter's burden, the burden
  taken as a first-order correction with the board's input resistance from the linear
  response) and at ``drive`` where a square driver has its own rail (its average; the
  burden's lowering of the rail is carried as spread, relative I·R_burden / drive swing).
- ``dc-loaded`` at each node for each of the profile's test loads: each (variant, load) is
  solved once without the meter, from the variant's own steady state, and the meter corrected
  through that loaded board's Thevenin resistance as for ``dc``. Alongside, the tolerance
  spread of the *drop* (unloaded minus loaded reading at the node), whose first-order
  sensitivities are the difference of the two readings' sensitivities: tolerances that move
  both readings alike (diode drops, drive) cancel in it (the ranking uses it, see there).
- ``diode-test`` (forward, board off) at each diode, from ``readouts.diode_test``: the
  healthy board decides whether a part's reading tells anything (settle time, parallel
  paths); a part whose reading does not is marked "lift one leg" and not predicted. A fault
  changes a diode test only where it changes the unpowered DC network (a diode's junction or
  leakage, a capacitor's leakage, a shunt or source resistance), and only at the diodes
  touching the nodes it changes: those (row, diode) pairs are run, the rest take the healthy
  value (``tests/core/test_dictionary_channels.py`` checks this against every pair).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params, build_circuit, stack
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.readouts.current import (
    rail_amps,
    rail_sources,
    source_amps,
    supply_index,
)
from fieldtool.core.circuit.readouts.diode_test import diode_test_rows, diode_tests
from fieldtool.core.circuit.readouts.powered import (
    ac_gain,
    ac_rms_reading,
    drive_hz,
    node_admittance,
    scope_ripple,
)
from fieldtool.core.circuit.readouts.spread import (
    accuracy_sigma,
    diode_drop_sigma,
    tolerance_sigma,
    tolerance_steps,
)
from fieldtool.core.circuit.readouts.waveform import rms_form, shunt_divider
from fieldtool.core.circuit.response import Response, linear_response
from fieldtool.core.circuit.solver import Period, _take_period, steady_state
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.circuit.staged import staged_steady_state
from fieldtool.core.diagnosis.faults import Hypothesis, apply_fault, catalog
from fieldtool.core.errors import InputError, SolverError
from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    RIPPLE_PP,
    Quantity,
)

# 5: every measurement kind (ripple, AC, current, test loads, diode test); 4: no hypothesis that
# cannot differ from healthy, grids in range
DICTIONARY_VERSION = 5
STEPS_PER_PERIOD = 40
METER_SOLVE_FRACTION = 0.01  # meter loading above this → solve with the meter in place

MODEL_FLOOR = 0.005  # relative: the solver agrees with ngspice within 0.5 % (tests/core)
MODEL_FLOOR_FAULT = 0.01  # faults with large currents (shorts) resolve coarser in time
MODEL_FLOOR_V = 0.005
# Ripple and AC from a 40-step period: the peaks between steps are refined, yet a coarser grid
# than `expect`'s 80 steps moves them by a few percent (tests/core compare the two).
WAVE_FLOOR = 0.05
CURRENT_FLOOR = 0.01  # relative (a period average, like DC)
DROP_FLOOR = 0.002  # of the node's reading: the model's error largely cancels in a difference
DIODE_FLOOR_V = 0.001  # the diode test agrees with ngspice within microvolts (tests/core)
METER_SOLVE_ITERATIONS = 10
METER_SOLVE_STEPS = 16  # floating nodes move slowly; a coarse grid reads them as well
METER_SOLVE_TOL = 1e-4
FLOAT_SHARE = 0.5  # of the meter's pull on a floating node, allowed as drift (see module doc)
LOADED_ITERATIONS = 40  # a test load can move a board far from its unloaded state

# The channels a measurement kind has, for listing and coverage.
KIND_ORDER = (DC, RIPPLE_PP, AC_RMS, CURRENT, DC_LOADED, DIODE_TEST)


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
class Channel:
    """One measurement the board allows: where, which kind, its settings, and per row its
    as-read mean and spread (1σ, tolerances and model; the instrument's accuracy excluded).

    ``mean`` is NaN where the row predicts the meter's over-range (a diode test's OL) or where
    the row could not be solved for this reading (``unknown``).
    """

    at: str
    quantity: Quantity
    conditions: tuple[tuple[str, float], ...]
    mean: np.ndarray  # (R,)
    sigma: np.ndarray  # (R,)
    over: np.ndarray  # (R,) bool: the row predicts OL
    unknown: np.ndarray  # (R,) bool: no prediction for this row

    @property
    def key(self) -> tuple[str, str, tuple[tuple[str, float], ...]]:
        """(at, quantity name, conditions): one reading of this channel replaces another."""
        return (self.at, self.quantity.name, self.conditions)


@dataclass(frozen=True)
class FaultDictionary:
    """Every hypothesis's expected readings and spreads, every available measurement kind."""

    profile: Profile
    nodes: tuple[str, ...]
    labels: dict[str, str]
    hypotheses: tuple[Hypothesis, ...]
    row_hypothesis: np.ndarray  # (R,) index into hypotheses
    row_severity: np.ndarray  # (R,) severity (nan when the mode has none)
    mean: np.ndarray  # (R, P) as-read DC volts
    sigma: np.ndarray  # (R, P) spread from tolerances and model (1σ), meter accuracy excluded
    ripple: np.ndarray  # (R, P) peak-to-peak volts as the scope reads them
    unloaded: np.ndarray  # (R, P) DC volts with no meter on the board
    meter_solved: np.ndarray  # (R, P) bool: the meter decides this reading
    failed: tuple[str, ...] = ()  # fault specs that did not converge (left out, said plainly)
    ripple_sigma: np.ndarray | None = None  # (R, P)
    ac_rms: np.ndarray | None = None  # (R, P) volts on a true-RMS meter's AC range
    ac_sigma: np.ndarray | None = None  # (R, P)
    rails: tuple[str, ...] = ()  # (Q,) "supply" and/or "drive": where a current can be read
    current: np.ndarray | None = None  # (R, Q) amps through the meter's burden
    current_sigma: np.ndarray | None = None  # (R, Q)
    test_loads: tuple[float, ...] = ()  # (L,) ohms
    loaded: np.ndarray | None = None  # (R, L, P) DC volts with the test load on; NaN unsolved
    loaded_sigma: np.ndarray | None = None  # (R, L, P)
    drop_sigma: np.ndarray | None = None  # (R, L, P) spread of (unloaded − loaded) reading
    diodes: tuple[str, ...] = ()  # (k,) default designators
    diode_volts: np.ndarray | None = None  # (R, k) forward diode test; NaN where OL
    diode_sigma: np.ndarray | None = None  # (R, k)
    diode_lift: tuple[str, ...] = ()  # (k,) why a part's test tells nothing ('' where it does)
    output_node: str = ""  # where a test load is clipped on
    _channels: dict = field(default_factory=dict, compare=False, repr=False)

    def node_index(self, node: str) -> int:
        """Column of a probe node."""
        return self.nodes.index(node)

    def meter_sigma(self, volts: np.ndarray | float) -> np.ndarray:
        """1σ of the DC meter's own error at a reading: its accuracy as a rectangular bound."""
        return accuracy_sigma(self.profile, "dc", volts)

    def rows_of(self, key: str) -> np.ndarray:
        """Row indices of one hypothesis."""
        h = next(i for i, hyp in enumerate(self.hypotheses) if hyp.key == key)
        return np.flatnonzero(self.row_hypothesis == h)

    def band(self, node: str, key: str = "healthy") -> Band:
        """Expected DC reading and its ~95 % range under one hypothesis (default healthy)."""
        return self.channel_band(self.channel(node, DC.name), key)

    def channel_band(self, ch: Channel, key: str = "healthy") -> Band:
        """Expected reading of a channel and its ~95 % range, the instrument included."""
        rows = self.rows_of(key)
        mu = ch.mean[rows]
        known = np.isfinite(mu)
        if not known.any():
            return Band(math.nan, math.nan, math.nan, math.nan)
        mu = mu[known]
        kind = ch.quantity.name
        s = np.sqrt(ch.sigma[rows][known] ** 2 + accuracy_sigma(self.profile, kind, mu) ** 2)
        low, high = float((mu - 2 * s).min()), float((mu + 2 * s).max())
        centre = float(mu[0]) if len(mu) == 1 else float(np.median(mu))
        return Band(centre, low, high, float(s.max()))

    # --- channels ------------------------------------------------------------------------

    def part_name(self, ref: str) -> str:
        """A diode's designator as the board shows it."""
        return display_name(self.profile, ref)

    def resolve_part(self, name: str) -> str:
        """The default designator of a diode named as the board shows it or by default."""
        wanted = name.strip().lower()
        for ref in self.diodes:
            if wanted in (ref.lower(), self.part_name(ref).lower()):
                return ref
        shown = ", ".join(self.part_name(r) for r in self.diodes) or "none"
        raise InputError(f"part {name.strip()!r} is not a diode of this board (diodes: {shown})")

    def channel(
        self, at: str, quantity: str, conditions: tuple[tuple[str, float], ...] = ()
    ) -> Channel:
        """One measurement channel; InputError when the board does not allow it."""
        key = (at, quantity, tuple(conditions))
        if key not in self._channels:
            self._channels[key] = self._make_channel(at, quantity, tuple(conditions))
        return self._channels[key]

    def channel_keys(self) -> list[tuple[str, str, tuple[tuple[str, float], ...]]]:
        """Every measurement this board allows, as (at, quantity, conditions), in kind order:
        each kind at every node, rail or diode (diodes whose test tells nothing left out)."""
        keys: list[tuple[str, str, tuple[tuple[str, float], ...]]] = []
        keys += [(n, DC.name, ()) for n in self.nodes]
        if self.ripple_sigma is not None:
            keys += [(n, RIPPLE_PP.name, ()) for n in self.nodes]
        if self.ac_rms is not None:
            keys += [(n, AC_RMS.name, ()) for n in self.nodes]
        keys += [(rail, CURRENT.name, ()) for rail in self.rails]
        for ohms in self.test_loads:
            keys += [(n, DC_LOADED.name, (("test_load_ohms", ohms),)) for n in self.nodes]
        keys += [
            (self.part_name(ref), DIODE_TEST.name, ())
            for ref, why in zip(self.diodes, self.diode_lift, strict=True)
            if not why
        ]
        return keys

    def lift_one_leg(self) -> dict[str, str]:
        """Diodes (as the board shows them) whose in-circuit test tells nothing, and why."""
        pairs = zip(self.diodes, self.diode_lift, strict=True)
        return {self.part_name(r): why for r, why in pairs if why}

    def _make_channel(
        self, at: str, quantity: str, conditions: tuple[tuple[str, float], ...]
    ) -> Channel:
        R = len(self.row_hypothesis)
        no = np.zeros(R, dtype=bool)
        if quantity == DIODE_TEST.name:
            if self.diode_volts is None:
                raise InputError(f"{self.profile.name}: no diode tests in this dictionary")
            i = self.diodes.index(self.resolve_part(at))
            if self.diode_lift[i]:
                raise InputError(
                    f"diode test of {self.part_name(self.diodes[i])} in circuit tells nothing "
                    f"({self.diode_lift[i]}): lift one leg to test this part"
                )
            volts = self.diode_volts[:, i]
            over = np.isnan(volts)
            return Channel(at, DIODE_TEST, (), volts, self.diode_sigma[:, i], over, no)
        if quantity == CURRENT.name:
            if at not in self.rails:
                rails = ", ".join(self.rails) or "none on this board"
                raise InputError(f"current at {at!r}: it can be read at {rails}")
            q = self.rails.index(at)
            amps = self.current[:, q]
            return Channel(at, CURRENT, (), amps, self.current_sigma[:, q], no, np.isnan(amps))
        if at not in self.nodes:
            raise InputError(f"node {at!r} is not on {self.profile.name} ({', '.join(self.nodes)})")
        j = self.node_index(at)
        if quantity == DC.name:
            return Channel(at, DC, (), self.mean[:, j], self.sigma[:, j], no, no)
        if quantity == RIPPLE_PP.name and self.ripple_sigma is not None:
            return Channel(at, RIPPLE_PP, (), self.ripple[:, j], self.ripple_sigma[:, j], no, no)
        if quantity == AC_RMS.name and self.ac_rms is not None:
            return Channel(at, AC_RMS, (), self.ac_rms[:, j], self.ac_sigma[:, j], no, no)
        if quantity == DC_LOADED.name:
            l = self.load_index(dict(conditions).get("test_load_ohms", math.nan))
            v, s = self.loaded[:, l, j], self.loaded_sigma[:, l, j]
            return Channel(at, DC_LOADED, conditions, v, s, no, np.isnan(v))
        raise InputError(f"{quantity} readings are not predicted for {self.profile.name}")

    def load_index(self, ohms: float) -> int:
        """Which of the profile's test loads a resistance is (within 1 %)."""
        for l, r in enumerate(self.test_loads):
            if abs(ohms - r) <= 0.01 * r:
                return l
        kept = ", ".join(f"{r:g} Ω" for r in self.test_loads) or "none in the profile"
        raise InputError(
            f"a test load of {ohms:g} Ω is not one of this board's test loads ({kept}); add it "
            "to the profile's [test_loads]"
        )

    def drop_channel(self, node: str, ohms: float) -> tuple[np.ndarray, np.ndarray]:
        """(R,) mean and tolerance spread of the drop a test load causes at a node: the DC
        reading minus the reading under the load (NaN where the loaded board is unsolved)."""
        j, l = self.node_index(node), self.load_index(ohms)
        return self.mean[:, j] - self.loaded[:, l, j], self.drop_sigma[:, l, j]


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

    ``progress(done, total)`` is called as variants converge (the first 70 % of the work), and
    as the test loads, the meter-dominated readings and the diode tests are done (the rest).
    """
    circuit, all_params, hyps, labels = profile_variants(profile)

    def base_progress(done: int, total: int) -> None:
        if progress:
            progress(int(70 * done / total), 100)

    ss = staged_steady_state(circuit, all_params, steps, progress=base_progress)
    if not ss.converged[0]:
        raise SolverError(f"{profile.path}: the healthy board's steady state did not converge")
    ok = ss.converged
    keep = np.flatnonzero(ok)
    params = all_params.take(keep)
    period = _take_period(ss.period, keep)
    row_hyp = np.array([r[0] for r in labels])[keep]
    failed = tuple(labels[r][2].spec(profile) for r in np.flatnonzero(~ok) if labels[r][2])

    resp = linear_response(circuit, params, period.x_start, steps)
    pull = resp.thevenin_ohms / profile.meter_ohms
    mean = resp.avg / (1.0 + pull)
    solved = np.abs(pull) > METER_SOLVE_FRACTION
    metered_ripple = np.full_like(mean, np.nan)
    unsure = _solve_with_meter(
        circuit, params, profile, period.x_start, solved, mean, metered_ripple, steps
    )
    if progress:
        progress(75, 100)
    sigma = tolerance_sigma(
        profile, circuit, resp.d_cap, resp.d_diode, resp.d_drive, resp.d_supply
    ) / (1.0 + np.abs(pull))
    sigma = np.sqrt(sigma**2 + _severity_sigma(mean, row_hyp) ** 2)
    sigma = _finish_sigma(sigma, mean, resp.avg, solved, unsure, row_hyp)

    waves = _waveforms(circuit, params, period, profile, steps, row_hyp, solved, metered_ripple)
    rails, amps, amps_sigma = _currents(circuit, params, period, profile, resp, row_hyp, waves)
    if progress:
        progress(80, 100)
    loads = tuple(t.ohms for t in profile.test_loads)
    loaded, loaded_sigma, drop_sigma = _test_loads(
        circuit, params, period, profile, steps, loads, resp, mean, row_hyp, unsure
    )
    if progress:
        progress(90, 100)
    diodes, dv, ds, lift = _diode_channel(circuit, params, profile, row_hyp)
    if progress:
        progress(100, 100)
    return FaultDictionary(
        profile=profile,
        nodes=tuple(circuit.name(i) for i in circuit.probe_nodes),
        labels=dict(circuit.labels),
        hypotheses=hyps,
        row_hypothesis=row_hyp,
        row_severity=np.array([r[1] for r in labels], dtype=float)[keep],
        mean=mean,
        sigma=sigma,
        ripple=waves.ripple,
        unloaded=resp.avg,
        meter_solved=solved,
        failed=failed,
        ripple_sigma=waves.ripple_sigma,
        ac_rms=waves.ac,
        ac_sigma=waves.ac_sigma,
        rails=rails,
        current=amps,
        current_sigma=amps_sigma,
        test_loads=loads,
        loaded=loaded,
        loaded_sigma=loaded_sigma,
        drop_sigma=drop_sigma,
        diodes=diodes,
        diode_volts=dv,
        diode_sigma=ds,
        diode_lift=lift,
        output_node=circuit.name(circuit.output_node),
    )


# --- DC at each node ----------------------------------------------------------------------


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


def _severity_sigma(values: np.ndarray, row_hyp: np.ndarray) -> np.ndarray:
    """Spread for severities between grid points: a quarter of the step to a neighbour.

    A graded mode is solved at a few severities only; a board between two of them reads
    between their predictions, so each row's spread covers half-way to its farther neighbour
    at two sigma. ``values`` is (R, ...); NaN steps count as none.
    """
    same = (row_hyp[1:] == row_hyp[:-1]).reshape(-1, *(1,) * (values.ndim - 1))
    step = np.where(same, np.nan_to_num(np.abs(np.diff(values, axis=0))), 0.0)  # (R−1, ...)
    pad = np.zeros((1, *values.shape[1:]))
    left = np.concatenate([pad, step])  # to the previous row of the same hypothesis
    right = np.concatenate([step, pad])  # to the next one
    return 0.25 * np.maximum(left, right)


def _not_narrower(s: np.ndarray, row_hyp: np.ndarray) -> np.ndarray:
    """A faulted board carries every tolerance of the healthy one and more: its spread is never
    narrower, so a reading at the healthy value never favours a fault over healthy."""
    healthy = s[row_hyp == 0][0]
    return np.fmax(s, np.where(np.isfinite(healthy), healthy, 0.0)[None])


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
    extra = (1,) * (mean.ndim - 1)
    floor = np.where(row_hyp.reshape(-1, *extra) == 0, MODEL_FLOOR, MODEL_FLOOR_FAULT)
    s = np.sqrt(sigma**2 + (floor * np.abs(mean)) ** 2 + MODEL_FLOOR_V**2)
    drift = np.where(solved, FLOAT_SHARE * np.abs(unloaded - mean), 0.0)
    drift = np.where(unsure, np.abs(unloaded), drift)
    s = np.sqrt(s**2 + drift**2)
    return _not_narrower(s, row_hyp)


# --- ripple and AC ------------------------------------------------------------------------


@dataclass(frozen=True)
class _Waves:
    ripple: np.ndarray  # (R, P)
    ripple_sigma: np.ndarray
    ac: np.ndarray
    ac_sigma: np.ndarray
    rail_rel: float  # the healthy drive rail current's relative tolerance spread


def _waveforms(
    circuit: Circuit,
    params: Params,
    period: Period,
    profile: Profile,
    steps: int,
    row_hyp: np.ndarray,
    solved: np.ndarray,
    metered_ripple: np.ndarray,
) -> _Waves:
    """Ripple on the scope and AC RMS on the meter at every node of every row."""
    B, P = solved.shape
    inst = profile.instruments
    every = np.broadcast_to(np.arange(B)[:, None], (B, P))
    ripple = scope_ripple(circuit, params, period, every, inst)
    # The scope probe's resistance draws DC like the voltmeter: where that decides the node,
    # the ripple is read from the meter-in-place solve (coarse; widened below).
    moved = solved & np.isfinite(metered_ripple)
    ripple = np.where(moved, metered_ripple, ripple)
    ac = _ac_rms(circuit, params, period, inst)
    rel_ripple, rel_ac, rail_rel = _healthy_relative_spreads(
        circuit, params, period, profile, steps, ripple[0], ac[0]
    )

    def spread(value: np.ndarray, rel: np.ndarray, floor_abs: float) -> np.ndarray:
        s = np.sqrt(
            (rel[None] * value) ** 2
            + (WAVE_FLOOR * value) ** 2
            + _severity_sigma(value, row_hyp) ** 2
            + floor_abs**2
        )
        return _not_narrower(s, row_hyp)

    ripple_sigma = spread(ripple, rel_ripple, 0.0)
    ripple_sigma = np.where(solved, np.hypot(ripple_sigma, FLOAT_SHARE * ripple), ripple_sigma)
    return _Waves(ripple, ripple_sigma, ac, spread(ac, rel_ac, 0.0), rail_rel)


def _ac_rms(circuit: Circuit, params: Params, period: Period, inst) -> np.ndarray:
    """(B, P) the true-RMS meter's AC reading at every node of every row.

    As ``readouts.powered.ac_rms_reading``, as one quadratic form of each node's samples
    (``waveform.rms_form``) with the healthy board's gain at that node (the meter's bandwidth
    and its input's share of the node's admittance); a row whose node admittance differs (a
    capacitor lost or opened there) is scaled by its own divider at the drive frequency.
    """
    probe = np.array(circuit.probe_nodes) - 1
    g, c = node_admittance(circuit, params)  # (B, P)
    gain0 = ac_gain(circuit, g[:1], c[:1], inst)[0]  # (P, K)
    Q = rms_form(period.times, gain0)  # (P, T, T)
    wave = np.moveaxis(period.v[:, :, probe], 1, -1)  # (B, P, T)
    by_node = np.ascontiguousarray(wave.transpose(1, 0, 2))  # (P, B, T)
    power = (np.matmul(by_node, Q) * by_node).sum(axis=-1).T
    f0 = np.array([drive_hz(circuit)])
    own = shunt_divider(f0, g, c, 1.0 / inst.ac_input_ohms, inst.ac_input_farads)[..., 0]
    return np.sqrt(np.maximum(power, 0.0)) * own / own[:1]


def _healthy_relative_spreads(
    circuit: Circuit,
    params: Params,
    period: Period,
    profile: Profile,
    steps: int,
    ripple0: np.ndarray,
    ac0: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, float]:
    """(P,) relative 1σ of the healthy ripple and AC readings, and of the drive rail current,
    by forward differences over the tolerances (``spread.tolerance_steps``), one σ each."""
    healthy = params.take(np.array([0]))
    rows, d = tolerance_steps(circuit, healthy, profile)
    zero = np.zeros(d, dtype=np.intp)
    base = _take_period(period, zero)
    ss = steady_state(
        circuit,
        rows,
        x0=period.x_start[zero],
        steps_per_period=steps,
        guess=base,
        max_iterations=LOADED_ITERATIONS,
        fallback_periods=0,
    )
    good = np.flatnonzero(ss.converged)
    P = len(circuit.probe_nodes)
    if len(good) == 0:
        return np.zeros(P), np.zeros(P), 0.0
    per = _take_period(ss.period, good)
    nudged = rows.take(good)
    every = np.broadcast_to(np.arange(len(good))[:, None], (len(good), P))
    inst = profile.instruments
    d_ripple = scope_ripple(circuit, nudged, per, every, inst) - ripple0[None]
    d_ac = ac_rms_reading(circuit, nudged, per, inst) - ac0[None]

    def rel(delta: np.ndarray, value: np.ndarray) -> np.ndarray:
        s = np.sqrt((delta**2).sum(axis=0))
        return np.where(np.abs(value) > 0, s / np.where(value != 0, np.abs(value), 1.0), 0.0)

    rail_rel = 0.0
    if rail_sources(circuit):
        i0 = rail_amps(circuit, period, params, np.array([0]))[0]
        moved = rail_amps(circuit, per, nudged, np.arange(len(good)))
        rail_rel = float(np.sqrt(((moved - i0) ** 2).sum()) / abs(i0)) if i0 else 0.0
    return rel(d_ripple, ripple0), rel(d_ac, ac0), rail_rel


# --- currents -----------------------------------------------------------------------------


def _currents(
    circuit: Circuit,
    params: Params,
    period: Period,
    profile: Profile,
    resp: Response,
    row_hyp: np.ndarray,
    waves: _Waves,
) -> tuple[tuple[str, ...], np.ndarray, np.ndarray]:
    """The rails a current can be read at, and each row's reading and spread there."""
    B = params.batch
    burden = profile.instruments.burden_ohms
    rails: list[str] = []
    amps: list[np.ndarray] = []
    sigmas: list[np.ndarray] = []
    s = supply_index(circuit)
    if s is not None:
        node = circuit.sources[s].node
        i = source_amps(period, params, np.arange(B), node, s)
        g = params.s_g[:, s]
        v_s = params.s_high[:, s]
        if node in circuit.probe_nodes:
            j = circuit.probe_nodes.index(node)
            # The board's incremental input resistance from the node's Thevenin resistance
            # (the source in parallel with it), then the burden in series with the source:
            # i' = i·(Rs + Rin)/(Rs + Rb + Rin).
            rs = 1.0 / g
            th = resp.thevenin_ohms[:, j]
            r_in = np.where(th < rs, th * rs / np.maximum(rs - th, 1e-30), np.inf)
            factor = np.where(np.isfinite(r_in), (rs + r_in) / (rs + burden + r_in), 1.0)
            i = i * factor
            sig = tolerance_sigma(
                profile,
                circuit,
                -g[:, None] * resp.d_cap[:, j],
                -g[:, None] * resp.d_diode[:, j],
                -g * resp.d_drive[:, j],
                g * (v_s - resp.d_supply[:, j]),
            )
        else:
            sig = np.zeros(B)
        sig = np.sqrt(sig**2 + (CURRENT_FLOOR * i) ** 2 + _severity_sigma(i, row_hyp) ** 2)
        rails.append("supply")
        amps.append(i)
        sigmas.append(_not_narrower(sig, row_hyp))
    if rail_sources(circuit):
        i = rail_amps(circuit, period, params, np.arange(B))
        swing = max(abs(profile.drive_volts - profile.drive_low_volts), 1e-9)
        lowered = np.abs(i) * burden / swing  # the rail lowered by the burden, relative
        sig = np.sqrt(
            (waves.rail_rel * i) ** 2
            + (CURRENT_FLOOR * i) ** 2
            + (lowered * i) ** 2
            + _severity_sigma(i, row_hyp) ** 2
        )
        rails.append("drive")
        amps.append(i)
        sigmas.append(_not_narrower(sig, row_hyp))
    if not rails:
        return (), np.zeros((B, 0)), np.zeros((B, 0))
    return tuple(rails), np.stack(amps, axis=1), np.stack(sigmas, axis=1)


# --- test loads ---------------------------------------------------------------------------


def _test_loads(
    circuit: Circuit,
    params: Params,
    period: Period,
    profile: Profile,
    steps: int,
    loads: tuple[float, ...],
    resp: Response,
    mean: np.ndarray,
    row_hyp: np.ndarray,
    unsure: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(R, L, P) DC under each test load, its spread, and the spread of the drop it causes."""
    B, P = mean.shape
    L = len(loads)
    if L == 0:
        empty = np.zeros((B, 0, P))
        return empty, empty.copy(), empty.copy()
    variant = np.repeat(np.arange(B), L)
    rows = params.take(variant).copy()
    rows.g_shunt[:, circuit.output_node - 1] += np.tile(1.0 / np.asarray(loads, dtype=float), B)
    ss = steady_state(
        circuit,
        rows,
        x0=period.x_start[variant],
        steps_per_period=steps,
        guess=_take_period(period, variant),
        max_iterations=LOADED_ITERATIONS,
        fallback_periods=0,
    )
    ok = ss.converged
    lr = linear_response(circuit, rows, ss.period.x_start, steps)
    pull = lr.thevenin_ohms / profile.meter_ohms
    loaded = lr.avg / (1.0 + pull)
    scale = 1.0 / (1.0 + np.abs(pull))
    tol = tolerance_sigma(profile, circuit, lr.d_cap, lr.d_diode, lr.d_drive, lr.d_supply) * scale

    def per_variant(x: np.ndarray) -> np.ndarray:
        return x.reshape(B, L, *x.shape[1:])

    base_scale = 1.0 / (1.0 + np.abs(resp.thevenin_ohms / profile.meter_ohms))[variant]
    drop_tol = tolerance_sigma(
        profile,
        circuit,
        resp.d_cap[variant] * base_scale[..., None] - lr.d_cap * scale[..., None],
        resp.d_diode[variant] * base_scale[..., None] - lr.d_diode * scale[..., None],
        resp.d_drive[variant] * base_scale - lr.d_drive * scale,
        resp.d_supply[variant] * base_scale - lr.d_supply * scale,
    )
    loaded, tol, drop_tol = per_variant(loaded), per_variant(tol), per_variant(drop_tol)
    floating = per_variant(np.abs(pull) > METER_SOLVE_FRACTION)
    # Not solved again with the meter in place (as DC is): where the meter pulls a node hard
    # the reading lies anywhere between the linear estimate and the unmetered value.
    drift = np.where(floating, np.abs(per_variant(lr.avg) - loaded), 0.0)
    drift = np.where(unsure[:, None, :], np.abs(per_variant(lr.avg)), drift)
    bad = ~per_variant(ok)[..., None] | ~np.isfinite(loaded)
    loaded = np.where(bad, np.nan, loaded)
    floor = np.where(row_hyp[:, None, None] == 0, MODEL_FLOOR, MODEL_FLOOR_FAULT)
    sev = _severity_sigma(loaded, row_hyp)
    sigma = np.sqrt(tol**2 + (floor * loaded) ** 2 + MODEL_FLOOR_V**2 + sev**2 + drift**2)
    drop = mean[:, None, :] - loaded
    drop_sev = _severity_sigma(drop, row_hyp)
    drop_sigma = np.sqrt(
        drop_tol**2
        + (DROP_FLOOR * np.abs(mean[:, None, :])) ** 2
        + MODEL_FLOOR_V**2
        + drop_sev**2
        + drift**2
    )
    sigma = np.where(bad, np.nan, _not_narrower(sigma, row_hyp))
    drop_sigma = np.where(bad, np.nan, _not_narrower(drop_sigma, row_hyp))
    return loaded, sigma, drop_sigma


# --- diode tests --------------------------------------------------------------------------


DC_NETWORK_FIELDS = ("d_is", "d_nvt", "d_rs", "d_gp", "c_gl", "g_shunt", "s_g")


def _diode_channel(
    circuit: Circuit, params: Params, profile: Profile, row_hyp: np.ndarray
) -> tuple[tuple[str, ...], np.ndarray, np.ndarray, tuple[str, ...]]:
    """Forward diode tests at every diode of every row, and why a part's test tells nothing."""
    inst = profile.instruments
    healthy = params.take(np.array([0]))
    tests = diode_tests(circuit, healthy, inst)
    k = len(circuit.diode_refs)
    lift = tuple(tests.reason(0, i, 0) for i in range(k))
    B = params.batch
    volts = np.broadcast_to(tests.volts[0, :, 0], (B, k)).copy()
    sens = diode_drop_sigma(tests.volts_per_drop[0, :, 0])  # (k,)
    sigma = np.broadcast_to(sens, (B, k)).copy()
    variant, part = affected_pairs(circuit, params)
    if len(variant):
        rows = diode_test_rows(
            circuit,
            params,
            inst,
            variant,
            part,
            np.zeros(len(variant), dtype=bool),
            settle=False,
        )
        volts[variant, part] = rows.volts
        sigma[variant, part] = diode_drop_sigma(rows.volts_per_drop)
    sigma = np.sqrt(sigma**2 + DIODE_FLOOR_V**2 + _severity_sigma(volts, row_hyp) ** 2)
    sigma = _not_narrower(sigma, row_hyp)
    return tuple(circuit.diode_refs), volts, sigma, lift


def affected_pairs(circuit: Circuit, params: Params) -> tuple[np.ndarray, np.ndarray]:
    """(variant, diode) pairs whose unpowered DC network differs from row 0 near the diode.

    A row changes the diode test only through the elements that conduct at DC with the board
    off (``DC_NETWORK_FIELDS``); a changed element moves the test of a diode with a terminal on
    one of its nodes. The other pairs read as the healthy board.
    """
    base = params.take(np.array([0]))
    dn = circuit.diode_nodes  # (k, 2)
    k = len(dn)
    touched = np.zeros((params.batch, circuit.n + 1), dtype=bool)  # full node numbering
    own = np.zeros((params.batch, k), dtype=bool)
    for name in ("d_is", "d_nvt", "d_rs", "d_gp"):
        diff = ~np.isclose(getattr(params, name), getattr(base, name), rtol=1e-9, atol=0)
        own |= diff
        for e in range(2):
            np.logical_or.at(touched, (slice(None), dn[:, e]), diff)
    diff = ~np.isclose(params.c_gl, base.c_gl, rtol=1e-9, atol=0)
    for e in range(2):
        np.logical_or.at(touched, (slice(None), circuit.cap_nodes[: diff.shape[1], e]), diff)
    diff = ~np.isclose(params.g_shunt, base.g_shunt, rtol=1e-9, atol=0)
    touched[:, 1:] |= diff
    diff = ~np.isclose(params.s_g, base.s_g, rtol=1e-9, atol=0)
    nodes = np.array([s.node for s in circuit.sources])
    np.logical_or.at(touched, (slice(None), nodes), diff)
    touched[:, 0] = False  # ground touches everything; it is not a sign of a local change
    near = touched[:, dn[:, 0]] | touched[:, dn[:, 1]] | own  # (B, k)
    near[0] = False
    variant, part = np.nonzero(near)
    return variant, part
