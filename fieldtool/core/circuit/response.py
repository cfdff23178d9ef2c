"""First-order response of a periodic steady state: meter loading and tolerance sensitivities.

At a converged steady state x0* (capacitor voltages at the period start) one more period is
integrated, carrying forward the derivatives of the capacitor voltages with respect to x0 and
to a set of parameters θ (the variational equations of the backward-Euler map, the same
per-step Jacobians the shooting method uses; Aprille & Trick, Proc. IEEE 60(1), 1972). With
M = ∂Φ/∂x0 and Φθ = ∂Φ/∂θ at the end of the period, a small change δθ moves the periodic
state by δx0 = (I − M)⁻¹ Φθ δθ, and each node's period average by
δv̄ = (∂v̄/∂x0) δx0 + (∂v̄/∂θ) δθ.

The parameters are: each part capacitor's value (relative), each diode's forward drop (volts,
as a shift of its saturation current), the drive swing and the DC supply (relative), and a
unit DC current pushed into each probe node. The last gives the node's Thevenin resistance in
the period-average sense, R = ∂v̄_j/∂I_j, so a meter of input resistance Rm reads
v̄/(1 + R/Rm) while that is a small correction (larger ones are solved in full).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import Network, StepState, newton, period_grid


@dataclass(frozen=True)
class Response:
    """Averages and their first-order sensitivities at the probe nodes of each variant."""

    avg: np.ndarray  # (B, P) period average of each probe node (no meter on the board)
    ripple: np.ndarray  # (B, P) peak-to-peak over the period
    thevenin_ohms: np.ndarray  # (B, P) ∂v̄_j/∂I_j
    d_cap: np.ndarray  # (B, P, c) per unit relative change of each part capacitor
    d_diode: np.ndarray  # (B, P, k) per volt of forward-drop increase of each diode
    d_drive: np.ndarray  # (B, P) per unit relative change of the drive swing
    d_supply: np.ndarray  # (B, P) per unit relative change of the DC supply


def linear_response(
    circuit: Circuit, params: Params, x0: np.ndarray, steps_per_period: int = 80
) -> Response:
    """Run one period from the steady state ``x0`` (B, m) with the variational equations."""
    net = Network(circuit, params)
    times = period_grid(circuit, steps_per_period)
    m = x0.shape[1]
    k = len(circuit.diode_refs)
    c = m - circuit.stray_caps
    probe = np.array(circuit.probe_nodes) - 1
    P = len(probe)
    drive = [i for i, s in enumerate(circuit.sources) if s.kind != "dc"]
    supply = [i for i, s in enumerate(circuit.sources) if s.kind == "dc"]
    ac = any(s.kind == "sine" for s in circuit.sources) or not supply
    p = params
    src_all = net.sources_on(times[1:])  # (B, T, s)
    inj = net.injections(src_all)
    # ∂(source node injection)/∂θ for drive swing and supply, per step: (B, T, n)
    d_src = np.zeros_like(src_all)
    for i in drive:
        d_src[:, :, i] = src_all[:, :, i] if ac else src_all[:, :, i] - p.s_low[:, None, i]
    inj_drive = (p.s_g[:, None, :] * d_src) @ net.Es
    d_sup = np.zeros_like(src_all)
    for i in supply:
        d_sup[:, :, i] = src_all[:, :, i]
    inj_supply = (p.s_g[:, None, :] * d_sup) @ net.Es

    steps = np.diff(times)
    board = net.board()
    if board is not None:
        phi, avg, v_avg, v_min, v_max = board.response(
            steps, inj, inj_drive, inj_supply, x0, c, probe
        )
    else:
        phi, avg, v_avg, v_min, v_max = _variational(
            net, x0, steps, inj, inj_drive, inj_supply, c, probe
        )
    M = phi[:, :, :m]
    lift = np.linalg.solve(np.eye(m)[None] - M, phi[:, :, m:])  # δx0 per unit θ
    total = avg[:, :, :m] @ lift + avg[:, :, m:]
    th = total[:, :, c + k + 2 :]
    return Response(
        avg=v_avg,
        ripple=v_max - v_min,
        thevenin_ohms=th[:, np.arange(P), np.arange(P)],
        d_cap=total[:, :, :c],
        d_diode=total[:, :, c : c + k],
        d_drive=total[:, :, c + k],
        d_supply=total[:, :, c + k + 1],
    )


def _variational(
    net: Network,
    x0: np.ndarray,
    steps: np.ndarray,
    inj: np.ndarray,
    inj_drive: np.ndarray,
    inj_supply: np.ndarray,
    c: int,
    probe: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The numpy reference of the kernel's ``ft_response``: (phi, avg, v_avg, v_min, v_max)."""
    p = net.params
    B, m = x0.shape
    n, k = net.circuit.n, len(net.circuit.diode_refs)
    P = len(probe)
    q = c + k + 2 + P
    state = StepState(np.zeros((B, n)), np.zeros((B, k)))
    phi = np.zeros((B, m, m + q))
    phi[:, np.arange(m), np.arange(m)] = 1.0
    avg = np.zeros((B, P, m + q))
    v_avg = np.zeros((B, P))
    v_min = np.full((B, P), np.inf)
    v_max = np.full((B, P), -np.inf)
    x = x0.copy()
    period = steps.sum()
    unit = np.zeros((n, P))
    unit[probe, np.arange(P)] = 1.0
    for t, h in enumerate(steps):
        _, gc, a = net.for_step(h)
        J, _ = newton(net, x, state, inj[:, t], h)
        v, vj = state.v, state.vj
        across = v @ net.Ac.T - x  # (B, m) capacitor branch: node difference − state
        # right-hand sides of J·∂v = rhs for each θ at fixed x_prev
        rhs = np.zeros((B, n, m + q))
        rhs[:, :, :m] = net.Ac.T[None] * gc[:, None, :]
        dgc = gc * gc * h / p.c_f  # ∂gc/∂ln C
        rhs[:, :, m : m + c] = -(net.Ac.T[None, :, :c] * (dgc * across)[:, None, :c])
        e = np.exp(np.minimum(vj / p.d_nvt, 80.0))
        f = p.d_is * (e - 1.0)
        gj = p.d_is * e / p.d_nvt
        di = -f / (p.d_nvt * (1.0 + gj * p.d_rs))  # ∂(branch current)/∂(forward-drop shift)
        rhs[:, :, m + c : m + c + k] = -(net.Ad.T[None] * di[:, None, :])
        rhs[:, :, m + c + k] = inj_drive[:, t]
        rhs[:, :, m + c + k + 1] = inj_supply[:, t]
        rhs[:, :, m + c + k + 2 :] = unit[None]
        Z = np.linalg.solve(J, rhs)  # (B, n, m + q): ∂v/∂(x_prev, θ)
        dv = Z[:, :, :m] @ phi  # through x_prev
        dv[:, :, m:] += Z[:, :, m:]
        avg += (h / period) * dv[:, probe, :]
        v_avg += (h / period) * v[:, probe]
        v_min = np.minimum(v_min, v[:, probe])
        v_max = np.maximum(v_max, v[:, probe])
        # x_new = x + a (Ac v − x): its derivative
        new_phi = (1.0 - a)[:, :, None] * phi + a[:, :, None] * (net.Ac @ dv)
        da = a * (a - 1.0)  # ∂a/∂ln C
        idx = np.arange(c)
        new_phi[:, idx, m + idx] += (da * across)[:, :c]
        phi = new_phi
        x = x + a * across
    return phi, avg, v_avg, v_min, v_max
