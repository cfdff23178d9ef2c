"""Periodic steady state of a batch of circuit variants.

Time integration is backward Euler (L-stable, so hard drive edges do not ring; Kundert, *The
Designer's Guide to SPICE and Spectre*, 1995) on a grid graded after each drive edge, with
Newton iteration on the diodes: Shockley equation with the series resistance condensed into
the branch (an exact Schur complement of the internal node), SPICE junction limiting (pnjlim)
and GMIN. The periodic steady state is found by the shooting method (Aprille & Trick, Proc.
IEEE 60(1), 1972): Newton on x0 ↦ Φ(x0) − x0, with the monodromy matrix built from the
per-step sensitivities that reuse each step's converged Jacobian. Variants that do not
converge get plain transient periods and a second attempt; what still fails is reported as
not converged, never returned as an answer.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit import kernel
from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.topologies import topology_named
from fieldtool.core.circuit.topologies.base import StartCharge

GMIN = 1e-12  # S, from every node to ground (SPICE practice)
VNTOL = 1e-6  # V, Newton absolute tolerance
RELTOL = 1e-6
MAX_NEWTON = 60


def period_grid(circuit: Circuit, steps_per_period: int = 80) -> np.ndarray:
    """Time points of one period, t[0] = 0 … t[-1] = T, graded after each square edge."""
    period = circuit.period_s
    sine = all(s.kind in ("dc", "sine") for s in circuit.sources)
    if sine:
        # Backward Euler is first order; a sine drive has no edges to grade towards, so it
        # takes more uniform steps: 2.5× the square-wave count (the default 80 gives 200,
        # within 0.05 % of 400 steps on the shipped AC board; 40 gives 100, within 0.1 %).
        return np.linspace(0.0, period, max(steps_per_period * 5 // 2, 60) + 1)
    half = period / 2
    edge = circuit.edge_fraction * period
    n_edge = 4
    n_rest = max(steps_per_period // 2 - n_edge, 4)
    ramp = np.linspace(0.0, edge, n_edge + 1)
    u = np.linspace(0.0, 1.0, n_rest + 1)[1:]
    rest = edge + (half - edge) * u**2.5
    first = np.concatenate([ramp, rest])
    return np.concatenate([first, half + first[1:]])


def waveform_shape(kind: str, times: np.ndarray, circuit: Circuit) -> np.ndarray:
    """Waveform between 0 (low) and 1 (high) at the given times."""
    period = circuit.period_s
    phase = np.mod(times, period) / period
    if kind == "dc":
        return np.ones_like(times)
    if kind == "sine":
        return 0.5 * (1.0 + np.sin(2 * np.pi * phase))
    e = circuit.edge_fraction
    rise = np.clip(phase / e, 0.0, 1.0)
    fall = np.clip((phase - 0.5) / e, 0.0, 1.0)
    shape = np.where(phase < 0.5, rise, 1.0 - fall)
    return 1.0 - shape if kind == "square-inverted" else shape


class Network:
    """Matrices of one circuit for a batch of variants, reused across every time step.

    The dense per-variant matrices are built only when the numpy reference needs them; the
    compiled kernel takes the element values as they are (``board()``).
    """

    def __init__(self, circuit: Circuit, params: Params, reltol: float = RELTOL) -> None:
        self.circuit, self.params, self.reltol = circuit, params, reltol
        n = circuit.n
        self.Ad = _incidence(circuit.diode_nodes, n)
        self.Ac = _incidence(circuit.cap_nodes, n)
        self.Es = np.zeros((len(circuit.sources), n))
        for i, s in enumerate(circuit.sources):
            self.Es[i, s.node - 1] = 1.0
        self.vcrit = params.d_nvt * np.log(
            params.d_nvt / (np.sqrt(2.0) * np.maximum(params.d_is, 1e-300))
        )
        self._h_cache: dict[float, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        self.kinds = [s.kind for s in circuit.sources]
        self.has_sink = bool(np.any(params.i_load != 0))
        self._dense: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        self._board: kernel.Board | None = None

    def _matrices(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if self._dense is None:
            n, p = self.circuit.n, self.params
            Pd, Pc = _outer(self.Ad), _outer(self.Ac)
            g = p.d_gp @ Pd + p.c_gl @ Pc + p.s_g @ _outer(self.Es)
            G = g.reshape(p.batch, n, n) + GMIN * np.eye(n)
            idx = np.arange(n)
            G[:, idx, idx] += p.g_shunt
            self._dense = (Pd, Pc, G)
        return self._dense

    @property
    def Pd(self) -> np.ndarray:
        """Diode stamps: row i is the flattened outer product of diode i's incidence."""
        return self._matrices()[0]

    @property
    def Pc(self) -> np.ndarray:
        """Capacitor stamps, as ``Pd``."""
        return self._matrices()[1]

    @property
    def G_lin(self) -> np.ndarray:
        """(B, n, n) conductances that do not change with the step or the diodes."""
        return self._matrices()[2]

    def board(self) -> kernel.Board | None:
        """The batch laid out for the compiled kernel, or None where it is not in use."""
        if not kernel.available():
            return None
        if self._board is None:
            p = self.params
            self._board = kernel.Board(
                self.circuit, p, p.s_g @ self.Es, self.vcrit, GMIN, VNTOL, self.reltol, MAX_NEWTON
            )
        return self._board

    def sources_on(self, times: np.ndarray) -> np.ndarray:
        """Source voltages (B, T, s) at the given times."""
        p = self.params
        shape = np.stack([waveform_shape(k, times, self.circuit) for k in self.kinds], axis=-1)
        return p.s_low[:, None, :] + (p.s_high - p.s_low)[:, None, :] * shape[None]

    def injections(self, src: np.ndarray) -> np.ndarray:
        """Current injected into each node (B, T, n) by the sources."""
        p = self.params
        return (p.s_g[:, None, :] * src) @ self.Es

    def for_step(self, h: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(G_h, g_c, a) for step length h: Jacobian without diodes, capacitor companions."""
        key = float(h)
        hit = self._h_cache.get(key)
        if hit is None:
            p = self.params
            gc = 1.0 / (p.c_esr + h / p.c_f)
            n = self.circuit.n
            G = self.G_lin + (gc @ self.Pc).reshape(p.batch, n, n)
            hit = (G, gc, h * gc / p.c_f)
            if len(self._h_cache) < 256:
                self._h_cache[key] = hit
        return hit


def _incidence(pairs: np.ndarray, n: int) -> np.ndarray:
    a = np.zeros((len(pairs), n + 1))
    rows = np.arange(len(pairs))
    np.add.at(a, (rows, pairs[:, 0]), 1.0)
    np.add.at(a, (rows, pairs[:, 1]), -1.0)
    return a[:, 1:]


def _outer(a: np.ndarray) -> np.ndarray:
    return (a[:, :, None] * a[:, None, :]).reshape(a.shape[0], -1)


SINK_KNEE_VOLTS = 0.5


def sink_current(i_load: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Current drawn by constant-current loads at node voltages v, and its conductance.

    A current-sink load (a regulator, a programming pin) draws its rated current only while
    its supply has headroom; as the supply collapses it stops drawing, and it never pushes
    current back. Modelled as I·(1 − exp(−u/Vk)) for u > 0 and I·u/Vk below, u the node
    voltage in the load's polarity and Vk = 0.5 V (a modelling choice: common practice, no
    source). Above a few volts this is the rated current within exp(−u/Vk).
    """
    mag = np.abs(i_load)
    sign = np.where(i_load < 0, -1.0, 1.0)
    u = v * sign
    ex = np.exp(-np.maximum(u, 0.0) / SINK_KNEE_VOLTS)
    phi = np.where(u > 0, 1.0 - ex, u / SINK_KNEE_VOLTS)
    dphi = np.where(u > 0, ex, 1.0) / SINK_KNEE_VOLTS
    return sign * mag * phi, mag * dphi


def _pnjlim(vnew: np.ndarray, vold: np.ndarray, nvt: np.ndarray, vcrit: np.ndarray) -> np.ndarray:
    """SPICE junction-voltage limiting (Nagel, SPICE2, 1975)."""
    big = (vnew > vcrit) & (np.abs(vnew - vold) > 2 * nvt)
    if not big.any():
        return vnew
    arg = 1.0 + (vnew - vold) / nvt
    lim_up = np.where(arg > 0, vold + nvt * np.log(np.maximum(arg, 1e-300)), vcrit)
    lim_from_off = nvt * np.log(np.maximum(vnew / nvt, 1e-300))
    limited = np.where(vold > 0, lim_up, lim_from_off)
    return np.where(big, limited, vnew)


@dataclass
class StepState:
    """Node voltages and junction voltages carried from step to step (Newton start)."""

    v: np.ndarray  # (B, n)
    vj: np.ndarray  # (B, k)


def newton(
    net: Network, x_prev: np.ndarray, state: StepState, b_src: np.ndarray, h: float
) -> tuple[np.ndarray, int]:
    """Solve one backward-Euler step's node voltages into ``state``; return (Jacobian, count).

    Each variant stops iterating once it has converged, so one hard variant does not make the
    whole batch iterate. The Jacobian is the one each variant's last update used, i.e. at its
    converged point.
    """
    p = net.params
    G, gc, _ = net.for_step(h)
    b = b_src + (gc * x_prev) @ net.Ac
    v, vj = state.v.copy(), state.vj.copy()
    B, n = v.shape
    J = np.empty((B, n, n))
    diag = np.arange(n)
    rows: np.ndarray | slice = slice(None)
    it = 0
    for it in range(1, MAX_NEWTON + 1):  # noqa: B007 (the count is returned)
        d_is, nvt, rs = p.d_is[rows], p.d_nvt[rows], p.d_rs[rows]
        vr, vjr = v[rows], vj[rows]
        e = np.exp(np.minimum(vjr / nvt, 80.0))
        f = d_is * (e - 1.0)
        gj = d_is * e / nvt
        den = 1.0 + gj * rs
        Jr = G[rows] + ((gj / den) @ net.Pd).reshape(-1, n, n)
        rhs = b[rows] - ((f - gj * vjr) / den) @ net.Ad
        if net.has_sink:
            i_s, g_s = sink_current(p.i_load[rows], vr)
            Jr[:, diag, diag] += g_s
            rhs = rhs - (i_s - g_s * vr)
        v_new = np.linalg.solve(Jr, rhs[..., None])[..., 0]
        vj_raw = (v_new @ net.Ad.T - rs * f + rs * gj * vjr) / den
        vj_new = _pnjlim(vj_raw, vjr, nvt, net.vcrit[rows])
        tol = net.reltol
        done = (np.abs(v_new - vr) <= VNTOL + tol * np.abs(v_new)).all(axis=1) & (
            np.abs(vj_new - vjr) <= VNTOL + tol * np.abs(vj_new)
        ).all(axis=1)
        J[rows], v[rows], vj[rows] = Jr, v_new, vj_new
        if done.all():
            break
        index = np.arange(B)[rows]
        rows = index[~done]
    state.v, state.vj = v, vj
    return J, it


def step(
    net: Network, x_prev: np.ndarray, state: StepState, b_src: np.ndarray, h: float, sens: bool
) -> tuple[np.ndarray, np.ndarray | None, int]:
    """One backward-Euler step of length h with source injections b_src (B, n) at its end.

    Returns the new capacitor voltages, their sensitivity to the old ones (or None) and the
    number of Newton iterations.
    """
    board = net.board()
    if board is not None:
        _own_state(state)
        _, X, _, S, its = board.period(
            np.array([h]), b_src[:, None, :], x_prev, state.v, state.vj, None, sens
        )
        return X[:, 0], S, int(its.max())
    _, gc, a = net.for_step(h)
    J, it = newton(net, x_prev, state, b_src, h)
    v = state.v
    x_new = x_prev + a * (v @ net.Ac.T - x_prev)
    if not sens:
        return x_new, None, it
    X = np.linalg.solve(J, net.Ac.T[None, :, :] * gc[:, None, :])  # (B, n, m)
    S = a[:, :, None] * (net.Ac @ X)
    m = S.shape[1]
    S[:, np.arange(m), np.arange(m)] += 1.0 - a
    return x_new, S, it


def _own_state(state: StepState) -> None:
    """Give ``state`` contiguous arrays of its own, which the kernel updates in place."""
    state.v = np.array(state.v, dtype=np.float64, order="C")
    state.vj = np.array(state.vj, dtype=np.float64, order="C")


@dataclass(frozen=True)
class Period:
    """One simulated period of every variant."""

    times: np.ndarray  # (T+1,)
    x_start: np.ndarray  # (B, m)
    x_end: np.ndarray  # (B, m)
    v: np.ndarray  # (B, T, n) node voltages at the end of each step
    x: np.ndarray  # (B, T, m) capacitor voltages at the end of each step
    src: np.ndarray  # (B, T, s) source voltages at the end of each step
    monodromy: np.ndarray | None  # (B, m, m)
    newton_iterations: int
    vj: np.ndarray | None = None  # (B, T, k) diode junction voltages at the end of each step


def run_period(
    net: Network,
    x0: np.ndarray,
    times: np.ndarray,
    state: StepState,
    sens: bool,
    guess: Period | None = None,
) -> Period:
    """Integrate one period from capacitor voltages x0.

    With ``guess`` (an earlier period on the same grid, e.g. the previous shooting iterate),
    the first step's Newton iteration starts from that period's first solution, and each later
    one from the previous step's solution plus the guess's change over this step, as long as
    the previous step ended within one n·Vt of the guess at every junction; a variant that has
    moved farther (an early shooting iterate) starts from its previous step's solution alone.
    """
    SRC = net.sources_on(times[1:])
    inj = net.injections(SRC)
    steps = np.diff(times)
    board = net.board()
    if board is not None:
        _own_state(state)
        V, X, VJ, M, its = board.period(
            steps, inj, x0, state.v, state.vj, None if guess is None else (guess.v, guess.vj), sens
        )
        return Period(times, x0, X[:, -1], V, X, SRC, M, int(its.max(initial=0)), VJ)
    B, m = x0.shape
    T = len(times) - 1
    n = net.circuit.n
    V = np.empty((B, T, n))
    VJ = np.empty((B, T, state.vj.shape[1]))
    X = np.empty((B, T, m))
    M = np.broadcast_to(np.eye(m), (B, m, m)).copy() if sens else None
    x = x0
    total = 0
    for k in range(T):
        if guess is not None and k == 0:
            state.v, state.vj = guess.v[:, 0], guess.vj[:, 0]
        elif guess is not None:
            near = (np.abs(state.vj - guess.vj[:, k - 1]) <= net.params.d_nvt).all(axis=1)[:, None]
            state.v = state.v + near * (guess.v[:, k] - guess.v[:, k - 1])
            state.vj = state.vj + near * (guess.vj[:, k] - guess.vj[:, k - 1])
        x, S, it = step(net, x, state, inj[:, k], steps[k], sens)
        total += it
        if sens:
            M = S @ M
        V[:, k], X[:, k], VJ[:, k] = state.v, x, state.vj
    return Period(times, x0, x, V, X, SRC, M, total, VJ)


@dataclass(frozen=True)
class SteadyState:
    """The periodic steady state of each variant, with how it was reached."""

    period: Period
    converged: np.ndarray  # (B,) bool
    residual: np.ndarray  # (B,) max |Φ(x0) − x0| in volts
    shooting_iterations: int
    fallback_periods: int


def steady_state(
    circuit: Circuit,
    params: Params,
    x0: np.ndarray | None = None,
    steps_per_period: int = 80,
    tol: float = 1e-6,
    max_iterations: int = 25,
    reltol: float = RELTOL,
    fallback_periods: int = 20,
    progress: Callable[[int, int], None] | None = None,
    damped: bool = False,
    guess: Period | None = None,
) -> SteadyState:
    """Periodic steady state of every variant in ``params`` by the shooting method.

    Variants leave the batch as they converge, so the hard ones do not make the easy ones
    iterate. ``progress(converged, total)`` is called after each shooting iteration. With
    ``damped``, each Newton step is shortened until the next simplified Newton correction
    shrinks (Deuflhard's natural monotonicity test, *Newton Methods for Nonlinear Problems*,
    Springer 2004): slower per iteration, but it tames starts where the diodes barely conduct
    and the linearised period map overshoots. ``guess`` (a period on the same grid, one row
    per variant) seeds each step's Newton iteration in the first period.
    """
    B = params.batch
    times = period_grid(circuit, steps_per_period)
    x = initial_state(circuit, params) if x0 is None else np.array(x0, dtype=float)
    m = x.shape[1]
    eye = np.eye(m)
    active = np.arange(B)
    net = Network(circuit, params, reltol)
    state = StepState(np.zeros((B, circuit.n)), np.zeros((B, len(circuit.diode_refs))))
    ok_all = np.zeros(B, dtype=bool)
    res_all = np.full(B, np.inf)
    store: dict[str, np.ndarray] = {}
    fallback = iterations = 0
    per = guess
    for attempt in range(2):
        for _ in range(max_iterations):
            iterations += 1
            per = run_period(net, x, times, state, sens=True, guess=per)
            r = per.x_end - x
            res = np.abs(r).max(axis=1)
            scale = 1.0 + np.abs(x).max(axis=1)
            dx = np.linalg.solve(per.monodromy - eye, -r[..., None])[..., 0]
            # The Newton correction estimates the distance to the fixed point; the residual
            # alone does not (slow reservoir modes have monodromy eigenvalues near 1).
            ok = (res <= tol * scale) & (np.abs(dx).max(axis=1) <= 10 * tol * scale)
            _store_rows(store, per, active, B, ok)
            ok_all[active] = ok
            res_all[active] = np.maximum(res, np.abs(dx).max(axis=1))
            if progress is not None:
                progress(int(ok_all.sum()), B)
            if ok.all():
                break
            limit = 4.0 * scale[:, None]
            dx = np.clip(dx, -limit, limit)
            if damped:
                x = _damp(net, x, dx, per, times, scale)
            else:
                x = x + dx
            if ok.any():
                keep = ~ok
                active, x = active[keep], x[keep]
                net = Network(circuit, params.take(active), reltol)
                state = StepState(state.v[keep], state.vj[keep])
                per = _take_period(per, keep)
        if not ok_all.all():
            _store_rows(store, per, active, B, ~ok_all[active])  # the last iterate of the rest
        if ok_all.all() or fallback_periods == 0:
            break
        if attempt == 0:
            # Fallback: plain transient periods from the last iterate, then shoot again.
            for _ in range(fallback_periods):
                x = run_period(net, x, times, state, sens=False).x_end
                fallback += 1
            per = None
    return SteadyState(Period(times=times, **store), ok_all, res_all, iterations, fallback)


def _damp(
    net: Network, x: np.ndarray, dx: np.ndarray, per: Period, times: np.ndarray, scale: np.ndarray
) -> np.ndarray:
    """The next shooting iterate with each variant's step shortened until it is trusted."""
    m = x.shape[1]
    A = per.monodromy - np.eye(m)
    size = np.linalg.norm(dx, axis=1)
    lam = np.ones(len(x))
    trial = size > 0.01 * scale  # small steps are already in Newton's quadratic region
    out = x + dx
    for _ in range(6):
        rows = np.flatnonzero(trial)
        if len(rows) == 0:
            break
        sub = Network(net.circuit, net.params.take(rows), net.reltol)
        xt = x[rows] + lam[rows, None] * dx[rows]
        state = StepState(per.v[rows, -1].copy(), per.vj[rows, -1].copy())
        guess = _take_period(per, rows)
        rt = run_period(sub, xt, times, state, sens=False, guess=guess).x_end - xt
        dbar = np.linalg.solve(A[rows], -rt[..., None])[..., 0]
        good = np.linalg.norm(dbar, axis=1) <= (1.0 - lam[rows] / 4.0) * size[rows]
        good |= lam[rows] < 0.02
        out[rows[good]] = xt[good]
        trial[rows[good]] = False
        lam[rows[~good]] *= 0.3
    return out


_PERIOD_ROWS = ("x_start", "x_end", "v", "x", "src", "monodromy", "vj")


def _store_rows(
    store: dict[str, np.ndarray], per: Period, rows: np.ndarray, B: int, pick: np.ndarray
) -> None:
    """Copy the picked rows of one period into the full-batch result arrays.

    Only rows that are final are copied (those that converged, and at the end the rest), not
    every active row at every iteration.
    """
    for name in _PERIOD_ROWS:
        value = getattr(per, name)
        if name not in store:
            store[name] = np.zeros((B, *value.shape[1:]))
        if pick.all():
            store[name][rows] = value
        elif pick.any():
            store[name][rows[pick]] = value[pick]
    store["newton_iterations"] = per.newton_iterations


def _take_period(per: Period, keep: np.ndarray) -> Period:
    """The same period for a subset of its variants."""
    rows = {name: getattr(per, name)[keep] for name in _PERIOD_ROWS}
    return Period(times=per.times, newton_iterations=per.newton_iterations, **rows)


def transient(
    circuit: Circuit, params: Params, x0: np.ndarray, periods: int, steps_per_period: int = 80
) -> list[Period]:
    """Plain transient: ``periods`` consecutive periods from capacitor voltages x0."""
    net = Network(circuit, params)
    times = period_grid(circuit, steps_per_period)
    state = StepState(
        np.zeros((params.batch, circuit.n)), np.zeros((params.batch, len(circuit.diode_refs)))
    )
    out, x = [], np.array(x0, dtype=float)
    for _ in range(periods):
        per = run_period(net, x, times, state, sens=False)
        out.append(per)
        x = per.x_end
    return out


def initial_state(circuit: Circuit, params: Params) -> np.ndarray:
    """Capacitor voltages at t = 0 from the topology's ideal relations (a Newton start)."""
    B = params.batch
    drop = np.clip(
        np.median(params.d_nvt * np.log1p(1e-3 / np.maximum(params.d_is, 1e-30)), axis=1), 0.05, 1.5
    )  # the forward drop at 1 mA
    drive = next(i for i, s in enumerate(circuit.sources) if s.kind != "dc")
    supply = [i for i, s in enumerate(circuit.sources) if s.kind == "dc"]
    start = StartCharge(
        vin=params.s_high[:, supply[0]] if supply else np.zeros(B),
        high=params.s_high[:, drive],
        low=params.s_low[:, drive],
        diode_drop=drop,
        polarity=circuit.polarity,
    )
    return topology_named(circuit.topology).start_charge(circuit.cap_refs, start)
