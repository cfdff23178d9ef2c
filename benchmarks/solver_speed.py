"""Time to the periodic steady state for dc-ladders of 5, 10 and 20 stages, against ngspice.

For each ladder: the median wall time of ``steady_state`` (shooting), and ngspice's time to
simulate the same netlist from the ideal-formula initial charge until its output's period
average stays within 1 mV of the settled value. Run: ``python benchmarks/solver_speed.py``.
"""

from __future__ import annotations

import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from fieldtool.core.circuit.expect import period_average  # noqa: E402
from fieldtool.core.circuit.netlist import build_circuit  # noqa: E402
from fieldtool.core.circuit.profile import profile_from_dict  # noqa: E402
from fieldtool.core.circuit.solver import initial_state, steady_state  # noqa: E402
from fieldtool.core.circuit.spice import spice_netlist  # noqa: E402


def board(stages: int):
    return profile_from_dict(
        {
            "board": {"name": f"bench-{stages}", "topology": "dc-ladder", "stages": stages},
            "supply": {"volts": 12.0},
            "drive": {"volts": 12.0, "frequency_hz": 10000.0, "source_ohms": 2.0},
            "diode": {
                "saturation_current_a": 2.52e-9,
                "emission_coefficient": 1.752,
                "series_ohms": 0.568,
            },
            "capacitor": {"farads": 4.7e-6, "tolerance": 0.2, "esr_ohms": 0.05},
            "load": {"ohms": 220000.0},
        }
    )


NGSPICE_LIMIT_S = 120.0  # a run still going after this counts as "more than this"


def ngspice_settle(circuit, params, target: float, periods: int) -> tuple[float, int | None]:
    """ngspice wall time to the first period after which the output stays within 1 mV."""
    x0 = initial_state(circuit, params)
    netlist = spice_netlist(circuit, params, x0, periods, 0, points_per_period=100)
    out = circuit.node_names[circuit.output_node - 1].lower()
    head, tail = netlist.split("wrdata out.txt ", 1)
    netlist = head + f"wrdata out.txt v({out})" + tail[tail.index("\n") :]
    with tempfile.TemporaryDirectory() as d:
        Path(d, "c.cir").write_text(netlist)
        t0 = time.perf_counter()
        try:
            subprocess.run(
                ["ngspice", "-b", "c.cir"],
                cwd=d,
                capture_output=True,
                check=True,
                timeout=NGSPICE_LIMIT_S,
            )
        except subprocess.TimeoutExpired:
            return NGSPICE_LIMIT_S, None
        wall = time.perf_counter() - t0
        data = np.loadtxt(Path(d, "out.txt"))
    t, v = data[:, 0], data[:, 1]
    T = circuit.period_s
    k = np.minimum((t / T).astype(int), periods - 1)
    sums = np.bincount(k, weights=v, minlength=periods)
    counts = np.maximum(np.bincount(k, minlength=periods), 1)
    avg = sums / counts
    off = np.abs(avg - target) > 1e-3
    if off[-1]:
        return wall, None
    settled = int(np.nonzero(off)[0][-1]) + 1 if off.any() else 0
    return wall * settled / periods, settled


def main() -> None:
    print(
        f"machine: {platform.processor() or platform.machine()}, {platform.system()}, "
        f"Python {platform.python_version()}, numpy {np.__version__}"
    )
    have_spice = shutil.which("ngspice") is not None
    print(
        f"{'stages':>6} {'shooting ms':>12} {'iters':>6} {'ngspice s':>10} {'periods':>8} "
        f"{'speed-up':>9}"
    )
    for n in (5, 10, 20):
        circuit, params = build_circuit(board(n))
        steady_state(circuit, params)  # warm caches
        times = []
        for _ in range(5):
            t0 = time.perf_counter()
            ss = steady_state(circuit, params)
            times.append(time.perf_counter() - t0)
        ms = statistics.median(times) * 1e3
        target = float(period_average(ss.period)[0, circuit.output_node - 1])
        if have_spice:
            spice_s, periods = ngspice_settle(circuit, params, target, 2000)
            # Not settled within the run: the run's time is a lower bound.
            label = f"{spice_s:10.2f}" if periods is not None else f">{spice_s:9.2f}"
            ratio = spice_s / (ms / 1e3)
            print(
                f"{n:>6} {ms:>12.1f} {ss.shooting_iterations:>6} {label} "
                f"{periods if periods is not None else 'n/a':>8} {ratio:>8.0f}x"
            )
        else:
            print(f"{n:>6} {ms:>12.1f} {ss.shooting_iterations:>6} {'(no ngspice)':>10}")


if __name__ == "__main__":
    main()
