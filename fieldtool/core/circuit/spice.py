"""The board's netlist as SPICE text, for cross-checks against a general-purpose simulator.

Pure text generation; running the simulator is the caller's business (tests and benchmarks).
"""

from __future__ import annotations

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import GMIN, SINK_KNEE_VOLTS


def spice_netlist(
    circuit: Circuit,
    params: Params,
    x0: np.ndarray,
    periods: int,
    save_from_period: int,
    points_per_period: int = 400,
    row: int = 0,
) -> str:
    """A netlist with a transient run and a ``wrdata`` of every node voltage.

    ``x0`` are initial capacitor voltages (applied with UIC); the run lasts ``periods`` periods
    and writes data from ``save_from_period`` on to ``out.txt``.
    """
    p = params.take([row])
    T = circuit.period_s
    tr = circuit.edge_fraction * T
    name = circuit.name

    def node(i: int) -> str:
        return "0" if i == 0 else name(i).lower()

    lines = ["* fieldtool cross-check netlist"]
    for i, s in enumerate(circuit.sources):
        hi, lo, r = p.s_high[0, i], p.s_low[0, i], 1.0 / p.s_g[0, i]
        ideal = f"src_{i}"
        if s.kind == "dc":
            wave = f"DC {hi:.12g}"
        elif s.kind == "sine":
            wave = f"SIN(0 {hi:.12g} {1 / T:.12g})"
        else:
            a, b = (lo, hi) if s.kind == "square" else (hi, lo)
            wave = f"PULSE({a:.12g} {b:.12g} 0 {tr:.12g} {tr:.12g} {T / 2 - tr:.12g} {T:.12g})"
        lines.append(f"V{i} {ideal} 0 {wave}")
        lines.append(f"RS{i} {ideal} {node(s.node)} {r:.12g}")
    for j, ref in enumerate(circuit.diode_refs):
        a, c = circuit.diode_nodes[j]
        lines.append(f"D{ref} {node(a)} {node(c)} dm{j}")
        lines.append(
            f".model dm{j} D(IS={p.d_is[0, j]:.6e} N={p.d_nvt[0, j] / _vt():.8g} "
            f"RS={p.d_rs[0, j]:.6g})"
        )
        if p.d_gp[0, j] > 0:
            lines.append(f"RDP{j} {node(a)} {node(c)} {1 / p.d_gp[0, j]:.6e}")
    for j, ref in enumerate(circuit.cap_refs):
        a, b = circuit.cap_nodes[j]
        top = node(a)
        if p.c_esr[0, j] > 0:
            top = f"esr{j}"
            lines.append(f"RE{j} {node(a)} {top} {p.c_esr[0, j]:.6g}")
        lines.append(f"C{ref} {top} {node(b)} {p.c_f[0, j]:.6e} IC={x0[row, j]:.9g}")
        if p.c_gl[0, j] > 0:
            lines.append(f"RL{j} {node(a)} {node(b)} {1 / p.c_gl[0, j]:.6e}")
    for i in range(1, circuit.n + 1):
        g = p.g_shunt[0, i - 1] + GMIN
        lines.append(f"RG{i} {node(i)} 0 {1 / g:.9e}")
        if p.i_load[0, i - 1] != 0:
            # the same current-sink load as the solver (fieldtool.core.circuit.solver.sink_current)
            amps, nd = p.i_load[0, i - 1], node(i)
            s = -1.0 if amps < 0 else 1.0
            u = f"({s:g}*v({nd}))"
            k = SINK_KNEE_VOLTS
            lines.append(
                f"BIL{i} {nd} 0 I = {amps:.9g} * ({u} > 0 ? (1 - exp(-{u}/{k:g})) : {u}/{k:g})"
            )
    step = T / points_per_period
    vectors = " ".join(f"v({node(i)})" for i in range(1, circuit.n + 1))
    lines += [
        ".options temp=25 tnom=25",
        ".control",
        "set wr_singlescale",
        "set filetype=ascii",
        f"tran {step:.6e} {periods * T:.9e} {save_from_period * T:.9e} {step:.6e} uic",
        f"wrdata out.txt {vectors}",
        "quit",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def _vt() -> float:
    # ngspice evaluates the diode at TEMP = 27 °C unless told; the netlist sets 25 °C.
    return 8.617333262e-5 * 298.15
