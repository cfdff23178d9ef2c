"""ngspice as the bench: a board's netlist, a fault written into it, a meter on one node.

The reference readings for the diagnosis checks come from ngspice (a general-purpose SPICE
simulator, Debian package ``ngspice``), not from fieldtool's own solver. The healthy netlist
is ``fieldtool.core.circuit.spice.spice_netlist``; the fault is then written into the SPICE text
independently of ``fieldtool.core.diagnosis.faults`` (an open part's lines are deleted, a short is a
resistor across the part, 1 Ω unless given, lost capacitance scales the capacitor's value, a
grown ESR scales its series resistor), and the meter is
a resistor from the probed node to ground. One ngspice run gives one node's reading, as a
technician gets it by moving the probe.

A reading counts only once it has settled. The run starts from the ideal-formula charge
(``fieldtool.core.circuit.solver.initial_state``); period averages are measured at twelve equally
spaced periods, and the settled value is the Aitken Δ² extrapolation of the 4th, 8th and 12th
(A. C. Aitken, Proc. R. Soc. Edinburgh 46, 1926), as in ``tests/core/test_ngspice_crosscheck``.
The drift still to go, |settled − last period|, must be within 0.5 % or 20 mV (where the
three are not a shrinking geometric sequence, the last third of the run must itself have moved
less than that); if it is not, the run is repeated four times longer, and a reading that never
settles fails the test. Period averages are ngspice's trapezoidal ``integ`` over one period
divided by the period: ``meas ... avg`` in ngspice-39 ends its window on the first time point
after ``to`` and came out up to 50 mV low on a pump node at 50 points a period.
"""

from __future__ import annotations

import re
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import initial_state
from fieldtool.core.circuit.spice import spice_netlist
from tests.conftest import NGSPICE

SHORT_OHMS = 1.0  # a failed-short diode or capacitor reads about an ohm (common practice)
MARKS = 12
POINTS_PER_PERIOD = 50  # ngspice's maximum step T/50; its own step control refines the edges
SETTLE_REL, SETTLE_ABS = 0.005, 0.020  # the cross-check's tolerance (0.5 % or 20 mV)


@dataclass(frozen=True)
class SpiceFault:
    """A fault as written into the SPICE text: a part designator, a mode, a severity."""

    ref: str  # default designator, "D3" or "C4"
    mode: str  # "open" | "short" | "lowcap" | "esr"
    fraction: float = 1.0  # capacitance left, for "lowcap"
    ohms: float = SHORT_OHMS  # the short's resistance, for "short"
    factor: float = 1.0  # how many times the ESR grew, for "esr"


@dataclass(frozen=True)
class MeteredReading:
    """One settled ngspice reading of a node with the meter on it."""

    node: str
    volts: float  # Aitken-extrapolated period average
    last_period_volts: float
    periods: int  # length of the run that settled


def _node(circuit: Circuit, index: int) -> str:
    return "0" if index == 0 else circuit.name(index).lower()


def write_fault(netlist: str, circuit: Circuit, fault: SpiceFault) -> str:
    """The netlist with one part open, shorted or short of capacitance."""
    lines = netlist.splitlines()
    if fault.ref in circuit.diode_refs:
        j = circuit.diode_refs.index(fault.ref)
        names = {f"d{fault.ref}".lower(), f"rdp{j}"}
        a, b = (_node(circuit, int(i)) for i in circuit.diode_nodes[j])
    else:
        j = circuit.cap_refs.index(fault.ref)
        names = {f"c{fault.ref}".lower(), f"re{j}", f"rl{j}"}
        a, b = (_node(circuit, int(i)) for i in circuit.cap_nodes[j])
    found = [i for i, line in enumerate(lines) if line.split(" ", 1)[0].lower() in names]
    assert found, f"{fault.ref} not found in the netlist"
    if fault.mode == "open":
        lines = [line for i, line in enumerate(lines) if i not in found]
    elif fault.mode == "short":
        at = next(i for i, line in enumerate(lines) if line.startswith(".options"))
        lines.insert(at, f"RFAULT {a} {b} {fault.ohms:.9g}")
    elif fault.mode == "lowcap":
        i = next(i for i in found if lines[i].lower().startswith(f"c{fault.ref}".lower()))
        words = lines[i].split()
        words[3] = f"{float(words[3]) * fault.fraction:.6e}"
        lines[i] = " ".join(words)
    elif fault.mode == "esr":
        i = next(i for i in found if lines[i].lower().startswith(f"re{j} "))
        words = lines[i].split()
        words[3] = f"{float(words[3]) * fault.factor:.6e}"
        lines[i] = " ".join(words)
    else:
        raise ValueError(fault.mode)
    return "\n".join(lines) + "\n"


def run_deck(workdir: Path, name: str, lines: list[str]) -> subprocess.CompletedProcess:
    """Write a netlist's lines to ``workdir/name`` and run ngspice on it in batch mode."""
    workdir.mkdir(parents=True, exist_ok=True)
    (workdir / name).write_text("\n".join(lines) + "\n")
    return subprocess.run(
        [NGSPICE, "-b", name], cwd=workdir, capture_output=True, text=True, timeout=600
    )


def period_average_measures(expr: str, periods: int, period: float) -> list[str]:
    """ngspice ``meas`` lines a0 … a11: ``expr`` integrated over one period at MARKS marks.

    Each window is one whole period starting a quarter period in, so its ends fall on the
    flat parts of a square drive rather than on an edge; ``integ`` (trapezoidal) over the
    window, to be divided by T: ngspice-39's ``avg`` ends its window on the first time point
    past ``to`` and is then off by O(step) on a square node.
    """
    T = period
    marks = np.linspace(periods / MARKS, periods, MARKS).round().astype(int)
    return [
        f"meas tran a{i} integ {expr} from={(k - 1) * T + T / 4:.9e} to={k * T + T / 4:.9e}"
        for i, k in enumerate(marks)
    ]


def aitken(a: np.ndarray) -> tuple[float, float]:
    """(settled value, distance still to go) of MARKS period averages (see the module doc).

    Where the 4th, 8th and 12th are not a shrinking geometric sequence, the settled value is
    the last and the distance to go is how far the last third of the run itself moved.
    """
    a1, a2, a3 = a[MARKS // 3 - 1], a[2 * MARKS // 3 - 1], a[-1]
    d1, d2 = a2 - a1, a3 - a2
    denom = d2 - d1
    geometric = abs(denom) > 1e-12 and d1 * d2 > 0 and abs(d2) < abs(d1)
    settled = a3 - d2 * d2 / denom if geometric else a3
    return float(settled), float(abs(settled - a3) if geometric else abs(d2))


def _measure_run(
    circuit: Circuit,
    params: Params,
    node: str,
    meter_ohms: float,
    fault: SpiceFault | None,
    periods: int,
    workdir: Path,
) -> np.ndarray:
    """Period averages of ``node`` at MARKS equally spaced periods of one ngspice run."""
    x0 = initial_state(circuit, params)
    text = spice_netlist(circuit, params, x0, periods + 1, 0, POINTS_PER_PERIOD)
    if fault is not None:
        text = write_fault(text, circuit, fault)
    T = circuit.period_s
    probe = node.lower()
    measures = period_average_measures(f"v({probe})", periods, T)
    lines = []
    for line in text.splitlines():
        if line.startswith(".options"):
            lines.append(f"RMETER {probe} 0 {meter_ohms:.9g}")
        if line.startswith("wrdata"):
            lines += measures
            lines.append("print " + " ".join(f"a{i}" for i in range(MARKS)))
            continue
        lines.append(line)
    proc = run_deck(workdir, "probe.cir", lines)
    found = dict(re.findall(r"^(a\d+)\s+=\s+(\S+)", proc.stdout, re.MULTILINE))
    if len(found) != MARKS:
        raise AssertionError(
            f"ngspice gave no averages:\n{proc.stdout[-1500:]}{proc.stderr[-1500:]}"
        )
    return np.array([float(found[f"a{i}"]) for i in range(MARKS)]) / T


def metered_reading(
    circuit: Circuit,
    params: Params,
    node: str,
    meter_ohms: float,
    workdir: Path,
    fault: SpiceFault | None = None,
    periods: int = 200,
    max_periods: int = 3200,
) -> MeteredReading:
    """The settled DC reading of ``node`` with a meter of ``meter_ohms`` on it (see module)."""
    while True:
        a = _measure_run(circuit, params, node, meter_ohms, fault, periods, workdir)
        settled, to_go = aitken(a)
        tol = max(SETTLE_REL * abs(settled), SETTLE_ABS)
        a3 = a[-1]
        if to_go <= tol:
            return MeteredReading(node, float(settled), float(a3), periods)
        if periods >= max_periods:
            raise AssertionError(
                f"ngspice: {node} not settled after {periods} periods "
                f"({to_go:.3g} V still to go): {np.round(a, 4)}"
            )
        periods *= 4
