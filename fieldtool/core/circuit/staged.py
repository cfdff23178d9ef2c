"""Steady states of many variants that are hard to reach from one start.

Shooting converges fast from a nearby start and can wander from a far one (a fault that
strands part of the ladder makes the period map nearly singular). The staged solve tries the
cheap starts first and keeps the slow, robust ones for the few variants that need them.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import Period, SteadyState, _take_period, steady_state


def staged_steady_state(
    circuit: Circuit,
    params: Params,
    steps: int,
    start: Period | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> SteadyState:
    """Every variant's steady state, trying cheap starts first and robust ones for the rest.

    1. From ``start``, the healthy board's steady state (a one-row period; when None, row 0
       of ``params`` is solved first and taken as healthy): most faults are near it, and its
       waveforms also seed each time step's Newton iteration.
    2. What is left, from the ideal-formula charge of the faulted board itself; then from
       all capacitors discharged (as at power-up); then after plain transient periods.
    3. What is still left, with damped Newton steps (slow, so only for the few that need it).
    Variants that converge in none are reported as failed, never given a number.
    """
    if start is None:
        healthy = steady_state(circuit, params.take([0]), steps_per_period=steps)
        if not healthy.converged[0]:
            return healthy
        start = healthy.period
    rows = np.zeros(params.batch, dtype=np.intp)
    ss = steady_state(
        circuit,
        params,
        x0=start.x_start[rows],
        steps_per_period=steps,
        progress=progress,
        guess=_take_period(start, rows),
        # An open part strands a stretch of the ladder on leakage; from the healthy start
        # shooting reaches it linearly, about one thermal voltage per diode per iteration,
        # in 12–15 iterations. Stopping earlier would restart it from a farther start.
        max_iterations=16,
        fallback_periods=0,
    )
    attempts = (("ideal", False, 15, 0), ("zero", False, 15, 0), ("ideal", False, 25, 20))
    for start, damped, limit, fallback in (*attempts, ("ideal", True, 12, 0)):
        left = np.flatnonzero(~ss.converged)
        if len(left) == 0:
            break
        part = params.take(left)
        x0 = np.zeros_like(ss.period.x_start[left]) if start == "zero" else None
        retry = steady_state(
            circuit,
            part,
            x0=x0,
            steps_per_period=steps,
            max_iterations=limit,
            fallback_periods=fallback,
            damped=damped,
        )
        ss = _merge_rows(ss, retry, left)
        if progress:
            progress(int(ss.converged.sum()), params.batch)
    return ss


def _merge_rows(ss: SteadyState, retry: SteadyState, rows: np.ndarray) -> SteadyState:
    """``ss`` with the given rows replaced by a retry's results."""
    per = ss.period
    fields = {}
    for name in ("x_start", "x_end", "v", "x", "src", "monodromy", "vj"):
        merged = getattr(per, name).copy()
        merged[rows] = getattr(retry.period, name)
        fields[name] = merged
    converged = ss.converged.copy()
    converged[rows] = retry.converged
    residual = ss.residual.copy()
    residual[rows] = retry.residual
    return SteadyState(
        Period(times=per.times, newton_iterations=per.newton_iterations, **fields),
        converged,
        residual,
        ss.shooting_iterations + retry.shooting_iterations,
        ss.fallback_periods,
    )
