"""ngspice as the bench for the readings beyond DC volts: the instruments as circuit elements.

Each instrument is written into the board's SPICE text (``fieldtool.core.circuit.spice``) as the
parts it is made of, independently of ``fieldtool.core.circuit.readouts``:

- a scope probe: its resistance and capacitance from the node to ground;
- a true-RMS meter on AC volts: its input capacitance to ground, its input resistance to a
  copy of the node's own DC level (an ideal buffer of the node behind a low-pass of 20
  periods: the DC-blocking capacitor, settled), and the reading taken as the RMS of the node's
  AC part after a first-order RC low-pass at the meter's bandwidth;
- a current meter: its burden resistance in series with the supply's source;
- a test load: a resistor from the output to ground, with the voltmeter's resistance on the
  probed node;
- the diode test: the board's sources at 0 V, an ideal current source into the red lead,
  clamped at the open-circuit voltage by a steep diode and a voltage source (``diode_test_op``).

A powered run starts from the ideal-formula charge (``solver.initial_state``), as the solver
cross-check does, and counts only once settled: the average of ``settle_on`` at twelve equally
spaced periods must approach its limit (Aitken Δ² extrapolation, A. C. Aitken, Proc. R. Soc.
Edinburgh 46, 1926) within 0.05 %, else the run is repeated four times longer.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import initial_state
from fieldtool.core.circuit.spice import spice_netlist
from tests.ngspice_probe import MARKS, aitken, period_average_measures, run_deck

SETTLE_REL = 5e-4
POINTS_PER_PERIOD = 200  # maximum step T/200; ngspice refines the drive edges itself


@dataclass(frozen=True)
class BenchRun:
    """The last period of a settled ngspice run."""

    times: np.ndarray  # (S,) seconds from the start of the last period
    values: np.ndarray  # (S, V) the requested vectors
    periods: int
    stdout: str


def _node(name: str) -> str:
    return name.lower()


def scope_probe(node: str, ohms: float, farads: float) -> list[str]:
    """A scope probe from the node to ground."""
    n = _node(node)
    return [f"RPROBE {n} 0 {ohms:.9g}", f"CPROBE {n} 0 {farads:.9g}"]


def ac_meter(
    node: str, ohms: float, farads: float, bandwidth_hz: float, period: float
) -> list[str]:
    """A DC-blocked AC voltmeter on the node; its reading is the AC RMS of v(acm2)."""
    n = _node(node)
    tau = 20 * period
    return [
        f"ELP acb 0 {n} 0 1",
        "RLP acb aclp 1e3",
        f"CLP aclp 0 {tau / 1e3:.9g}",
        "EREF acref 0 aclp 0 1",
        f"RIN {n} acref {ohms:.9g}",
        f"CIN {n} 0 {farads:.9g}",
        f"EM acm1 0 {n} acref 1",
        "RBW acm1 acm2 1e3",
        f"CBW acm2 0 {1 / (2 * np.pi * 1e3 * bandwidth_hz):.9g}",
    ]


def burden(netlist: str, source_index: int, ohms: float) -> str:
    """The netlist with a resistor of ``ohms`` in series with source ``source_index``."""
    lines = netlist.splitlines()
    i = next(k for k, line in enumerate(lines) if line.startswith(f"RS{source_index} "))
    name, a, b, value = lines[i].split()
    lines[i] = f"{name} burden_n {b} {value}"
    lines.insert(i, f"RBURDEN {a} burden_n {ohms:.9g}")
    return "\n".join(lines) + "\n"


def driver_from_rail(
    netlist: str,
    source_index: int,
    rail_volts: float,
    ohms: float,
    burden_ohms: float,
    period: float,
    edge: float,
) -> str:
    """The netlist with square drive ``source_index`` made by a push-pull driver on a rail.

    Two switches (on-resistance the driver's source resistance) connect the drive node to a
    rail or to ground, clocked like the drive; the rail is fed from ``rail_volts`` through
    the meter's burden and held up by a 100 µF bypass capacitor. The meter reads the average
    of i(VRAIL).
    """
    lines = netlist.splitlines()
    v = next(k for k, line in enumerate(lines) if line.startswith(f"V{source_index} "))
    r = next(k for k, line in enumerate(lines) if line.startswith(f"RS{source_index} "))
    node = lines[r].split()[2]
    pulse = f"PULSE(0 1 0 {edge:.9g} {edge:.9g} {period / 2 - edge:.9g} {period:.9g})"
    inverse = f"PULSE(1 0 0 {edge:.9g} {edge:.9g} {period / 2 - edge:.9g} {period:.9g})"
    driver = [
        f"VRAIL rail_in 0 DC {rail_volts:.9g}",
        f"RBURDENRAIL rail_in rail {burden_ohms:.9g}",
        f"CBYPASS rail 0 100u IC={rail_volts:.9g}",
        f"VCTRL ctrl 0 {pulse}",
        f"VCTRLB ctrlb 0 {inverse}",
        f"SHIGH rail {node} ctrl 0 swdrv",
        f"SLOW {node} 0 ctrlb 0 swdrv",
        f".model swdrv SW(VT=0.5 VH=0 RON={ohms:.9g} ROFF=1e9)",
    ]
    keep = [line for k, line in enumerate(lines) if k not in (v, r)]
    return "\n".join(keep[:v] + driver + keep[v:]) + "\n"


def powered_run(
    circuit: Circuit,
    params: Params,
    extra: list[str],
    vectors: list[str],
    settle_on: str,
    workdir: Path,
    periods: int = 400,
    max_periods: int = 6400,
    edit=None,
    max_drift: float = np.inf,
) -> BenchRun:
    """Run until settled; the last period of ``vectors`` (e.g. ``v(s3)``, ``i(v0)``).

    ``max_drift`` bounds how far the average of ``settle_on`` may still move in one period
    (volts): a reading of ripple needs it well below the ripple, since a node still charging
    adds its drift to the peak-to-peak of a period.
    """
    T = circuit.period_s
    while True:
        text = spice_netlist(
            circuit, params, initial_state(circuit, params), periods, 0, POINTS_PER_PERIOD
        )
        if edit is not None:
            text = edit(text)
        last = periods - 1  # the windows end a quarter period after their mark
        marks = np.linspace(last / MARKS, last, MARKS).round().astype(int)
        measures = period_average_measures(settle_on, last, T)
        lines = []
        for line in text.splitlines():
            if line.startswith(".options"):
                lines += extra
            if line.startswith("tran "):
                lines.append("save " + " ".join(dict.fromkeys([*vectors, settle_on])))
            if line.startswith("wrdata"):
                lines += measures
                lines.append("print " + " ".join(f"a{i}" for i in range(MARKS)))
                lines.append("wrdata wave.txt " + " ".join(vectors))
                continue
            lines.append(line)
        (workdir / "wave.txt").unlink(missing_ok=True)
        proc = run_deck(workdir, "bench.cir", lines)
        found = dict(re.findall(r"^(a\d+)\s+=\s+(\S+)", proc.stdout, re.MULTILINE))
        if len(found) != MARKS or not (workdir / "wave.txt").exists():
            raise AssertionError(f"ngspice failed:\n{proc.stdout[-1500:]}{proc.stderr[-1500:]}")
        a = np.array([float(found[f"a{i}"]) for i in range(MARKS)]) / T
        drift = abs(a[-1] - a[-2]) / max(marks[-1] - marks[-2], 1)
        if _settled(a) and drift <= max_drift:
            data = np.loadtxt(workdir / "wave.txt")  # time, then each vector
            last = data[data[:, 0] >= (periods - 1) * T * (1 - 1e-12)]
            return BenchRun(last[:, 0] - last[0, 0], last[:, 1:], periods, proc.stdout)
        if periods >= max_periods:
            raise AssertionError(
                f"ngspice not settled after {periods} periods ({drift:.3g} V a period): {a}"
            )
        periods *= 4


def _settled(a: np.ndarray) -> bool:
    limit, to_go = aitken(a)
    return to_go <= SETTLE_REL * max(abs(limit), 1e-9)


def period_average(run: BenchRun, column: int = 0) -> float:
    """Trapezoidal average of one column over the last period."""
    t, v = run.times, run.values[:, column]
    return float(np.trapezoid(v, t) / (t[-1] - t[0]))


def ac_rms(run: BenchRun, column: int = 0) -> float:
    """RMS of one column's AC part over the last period (trapezoidal)."""
    mean = period_average(run, column)
    t, v = run.times, run.values[:, column] - mean
    return float(np.sqrt(np.trapezoid(v * v, t) / (t[-1] - t[0])))


def _diode_meter(red: str, black: str, amps: float, open_volts: float) -> list[str]:
    """The diode test: a current source into the red lead, clamped at the open-circuit volts."""
    return [
        f"IMETER {black} {red} DC {amps:.9g}",
        f"DCLAMP {red} clamp dclamp",
        ".model dclamp D(IS=1e-12 N=0.05)",
        f"VCLAMP clamp {black} DC {open_volts:.9g}",
    ]


def _unpowered(circuit: Circuit, params: Params, text_periods: int = 1) -> str:
    off = params.copy()
    off.s_high[:] = 0.0
    off.s_low[:] = 0.0
    off.i_load[:] = 0.0
    text = spice_netlist(circuit, off, np.zeros((1, len(circuit.cap_refs))), text_periods, 0, 10)
    # Sources off: 0 V DC (a pulse or sine of zero amplitude would still set breakpoints).
    lines = [
        " ".join([*line.split()[:3], "DC", "0"]) if re.match(r"V\d+ ", line) else line
        for line in text.splitlines()
    ]
    return "\n".join(lines) + "\n"


def _difference(red: str, black: str) -> str:
    """v(red) − v(black) as an ngspice expression, ground being node 0."""
    if black == "0":
        return f"v({red})"
    return f"-v({black})" if red == "0" else f"v({red})-v({black})"


@dataclass(frozen=True)
class DiodeMeter:
    """A meter on diode test: its leads' nodes (``0`` for ground), current and open volts."""

    red: str
    black: str
    amps: float
    open_volts: float


def _diode_run(
    circuit: Circuit, params: Params, meter: DiodeMeter, analysis: list[str], workdir: Path, edit
) -> str:
    """Run ``analysis`` (ngspice control lines, with ``reading`` defined) on the unpowered
    board with the diode test on; ngspice's printed output."""
    text = _unpowered(circuit, params)
    if edit is not None:
        text = edit(text)
    r, b = _node(meter.red), _node(meter.black)
    lines = []
    for line in text.splitlines():
        if line.startswith(".options"):
            lines += _diode_meter(r, b, meter.amps, meter.open_volts)
        if line.startswith("tran "):
            lines += [a.replace("{reading}", _difference(r, b)) for a in analysis]
            continue
        if line.startswith("wrdata"):
            continue
        lines.append(line)
    proc = run_deck(workdir, "diode.cir", lines)
    return proc.stdout + proc.stderr


def diode_test_transient(
    circuit: Circuit, params: Params, meter: DiodeMeter, seconds: float, workdir: Path
) -> tuple[np.ndarray, np.ndarray]:
    """(times, reading) of a diode test from all discharged, the board off."""
    (workdir / "dt.txt").unlink(missing_ok=True)
    analysis = [
        f"tran {seconds / 2000:.6e} {seconds:.6e} 0 {seconds / 500:.6e} uic",
        "let reading = {reading}",
        "wrdata dt.txt reading",
    ]
    out = _diode_run(circuit, params, meter, analysis, workdir, None)
    if not (workdir / "dt.txt").exists():
        raise AssertionError(f"ngspice failed:\n{out[-3000:]}")
    data = np.loadtxt(workdir / "dt.txt")
    return data[:, 0], data[:, 1]


def diode_test_op(
    circuit: Circuit, params: Params, meter: DiodeMeter, workdir: Path, edit=None
) -> float:
    """The DC reading (v(red) − v(black)) of a diode test with the board off."""
    analysis = ["op", "let reading = {reading}", "print reading"]
    out = _diode_run(circuit, params, meter, analysis, workdir, edit)
    found = re.findall(r"^reading\s+=\s+(\S+)", out, re.MULTILINE)
    if not found:
        raise AssertionError(f"ngspice gave no reading:\n{out[-3000:]}")
    return float(found[-1])
