"""Readings beyond DC volts: speed of the predictions, and their agreement with ngspice.

Speed: ``board_readouts`` in process (median of 3; without and with the tolerance spreads) on
every shipped profile and the 10-stage bench board, and ``fieldtool expect`` as a whole
process. Agreement: on the small boards of ``tests/core/test_readouts_ngspice.py`` (3 stages,
47 nF at 10 kHz, 1 MΩ load; the AC-fed ladder 4.7 µF, 20 kΩ), every probe node's ripple
(scope) and AC RMS (meter), the supply current through the burden, the output under a
100 kΩ test load, and every diode's forward diode-test reading, each against ngspice with
the instrument built into the netlist (``tests/ngspice_instruments.py``).
Run: ``python benchmarks/readouts.py [--no-ngspice]``.
"""

from __future__ import annotations

import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from ten_stage import ten_stage_profile  # noqa: E402

from fieldtool.core.circuit.library import shipped_entries  # noqa: E402
from fieldtool.core.circuit.netlist import build_circuit  # noqa: E402
from fieldtool.core.circuit.readouts import board_readouts, diode_tests  # noqa: E402
from fieldtool.core.circuit.readouts.powered import powered_readouts  # noqa: E402
from fieldtool.core.circuit.solver import steady_state  # noqa: E402


def _median(fn, n: int = 3) -> float:
    times = []
    for _ in range(n):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def speed() -> None:
    boards = [(e.name, e.load()) for e in shipped_entries()] + [("10-stage", ten_stage_profile())]
    print("| board | readouts, no spreads | with spreads | `fieldtool expect` process |")
    print("|---|---:|---:|---:|")
    for name, profile in boards:
        bare = _median(lambda p=profile: board_readouts(p, spreads=False))
        full = _median(lambda p=profile: board_readouts(p, spreads=True))
        proc = "—"
        if name != "10-stage":
            cmd = [sys.executable, "-m", "fieldtool", "expect", name]
            took = _median(lambda c=cmd: subprocess.run(c, capture_output=True, check=True))
            proc = f"{took:.2f} s"
        print(f"| {name} | {bare:.2f} s | {full:.2f} s | {proc} |")


def agreement() -> None:
    from tests import ngspice_instruments as bench
    from tests.core.test_readouts_ngspice import BOARDS, TEST_LOAD, _ac_lines, _probe_lines

    work = Path(tempfile.mkdtemp())
    print("\n| board | reading | worst deviation from ngspice | where |")
    print("|---|---|---:|---|")
    for board, profile in BOARDS.items():
        circuit, params = build_circuit(profile)
        ss = steady_state(circuit, params)
        r = powered_readouts(circuit, params, ss.period, profile, (TEST_LOAD,), spreads=False)
        rip, ac = [], []
        for j, node in enumerate(r.nodes):
            v = f"v({node.lower()})"
            run = bench.powered_run(
                circuit,
                params,
                _probe_lines(board, node),
                [v],
                v,
                work / f"{board}{node}s",
                max_drift=5e-3 * max(r.ripple_pp[0, j], 1e-4),
            )
            wave = run.values[:, 0]
            rip.append((r.ripple_pp[0, j], float(wave.max() - wave.min()), node))
            run = bench.powered_run(
                circuit,
                params,
                _ac_lines(board, node),
                ["v(acm2)"],
                v,
                work / f"{board}{node}a",
                max_drift=1e-2 * max(r.ac_rms[0, j], 1e-4),
            )
            ac.append((r.ac_rms[0, j], bench.ac_rms(run), node))
        for label, rows, floor in (("ripple p-p", rip, 1e-3), ("AC RMS", ac, 1e-4)):
            worst = max(rows, key=lambda x: abs(x[0] - x[1]) / max(abs(x[1]), floor))
            dev = (worst[0] - worst[1]) / max(abs(worst[1]), floor)
            where = f"{worst[2]} ({worst[0]:.4g} V vs {worst[1]:.4g} V)"
            print(f"| {board} | {label} | {dev:+.2%} | {where} |")
        d = diode_tests(circuit, params, profile.instruments)
        worst = 0.0
        for i, ref in enumerate(d.diodes):
            a, c = (circuit.name(int(k)) for k in circuit.diode_nodes[i])
            red, black = ("0" if a == "GND" else a), ("0" if c == "GND" else c)
            inst = profile.instruments
            meter = bench.DiodeMeter(red, black, inst.diode_test_amps, inst.diode_test_volts)
            spice = bench.diode_test_op(circuit, params, meter, work / f"{board}{ref}")
            worst = max(worst, abs(d.volts[0, i, 0] - spice))
        print(f"| {board} | diode test, forward | {worst * 1e6:.0f} µV | every diode |")
        _currents_and_load(board, profile, circuit, params, r, work)
    print(f"\n(load average while measuring: {os.getloadavg()[0]:.1f})")


def _currents_and_load(board, profile, circuit, params, r, work: Path) -> None:
    """Supply lead, driver rail and the output under the test load, against ngspice."""
    from tests import ngspice_instruments as bench
    from tests.core.test_readouts_ngspice import TEST_LOAD

    out = circuit.name(circuit.output_node).lower()
    kinds = [s.kind for s in circuit.sources]
    rows = []
    if "dc" in kinds:
        i = kinds.index("dc")
        burden = profile.instruments.burden_ohms
        run = bench.powered_run(
            circuit,
            params,
            [],
            [f"i(v{i})"],
            f"v({out})",
            work / f"{board}-supply",
            edit=lambda t, i=i: bench.burden(t, i, burden),
        )
        rows.append(("supply current", r.supply_amps[0], -bench.period_average(run), "A"))
    if kinds.count("square") == 1 and "square-inverted" not in kinds:
        i = kinds.index("square")
        T = circuit.period_s

        def rail(t, i=i):
            return bench.driver_from_rail(
                t,
                i,
                profile.drive_volts,
                profile.drive_ohms,
                profile.instruments.burden_ohms,
                T,
                circuit.edge_fraction * T,
            )

        run = bench.powered_run(
            circuit, params, [], ["i(vrail)"], f"v({out})", work / f"{board}-rail", edit=rail
        )
        rows.append(("drive-rail current", r.rail_amps[0], -bench.period_average(run), "A"))
    extra = [f"RTEST {out} 0 {TEST_LOAD:.9g}", f"RMETER {out} 0 {profile.meter_ohms:.9g}"]
    run = bench.powered_run(circuit, params, extra, [f"v({out})"], f"v({out})", work / f"{board}-l")
    rows.append(("output under 100 kΩ", r.dc_loaded[0, 0, -1], bench.period_average(run), "V"))
    for label, ours, spice, unit in rows:
        print(
            f"| {board} | {label} | {(ours - spice) / abs(spice):+.2%} | "
            f"{ours:.5g} {unit} vs {spice:.5g} {unit} |"
        )


def main() -> None:
    print(
        f"{platform.processor() or platform.machine()}, {os.cpu_count()} CPUs, "
        f"Python {platform.python_version()}, numpy {np.__version__}; "
        f"load average {os.getloadavg()[0]:.1f} at start\n"
    )
    speed()
    if "--no-ngspice" not in sys.argv:
        agreement()


if __name__ == "__main__":
    main()
