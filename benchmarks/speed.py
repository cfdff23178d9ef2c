"""fieldtool against ngspice on the bench ladders: in process, as whole processes, and cached.

One run prints, with the machine and its load average:

1. the solver kernel's build cost (paid once, by ``pip install``);
2. the periodic steady state in process for 5, 10 and 20 stages, healthy and with an open
   diode: the compiled kernel, the numpy reference it replaced (``--before``), shooting
   iterations, and the inner loop's cost per step and per stage;
3. ngspice (``method=gear``; its default trapezoidal rule stalls on these ladders after about
   200 periods) simulating the same netlist from the ideal-formula charge until the output's
   period average stays within 1 mV of the steady state, then once more for just that many
   periods as one whole process ("ngspice to settle"), with a time limit;
4. whole processes: ``fieldtool expect`` on each board, and ``fieldtool diagnose`` on the
   10-stage board with an empty dictionary cache (cold) and a filled one (cached);
5. the 10-stage fault dictionary in process: built cold (CPU and wall) and loaded from cache.

Run: ``python benchmarks/speed.py [--before] [--runs N]`` (a few minutes; ngspice from the
Debian package ``ngspice``). Whole-process figures are medians of N runs with the bytecode
cache in place, as after an install.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import platform
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from ten_stage import bench_ladder, bench_profile  # noqa: E402

from fieldtool.core.circuit import kernel  # noqa: E402
from fieldtool.core.circuit.expect import period_average  # noqa: E402
from fieldtool.core.circuit.netlist import build_circuit  # noqa: E402
from fieldtool.core.circuit.profile_write import to_toml  # noqa: E402
from fieldtool.core.circuit.solver import (  # noqa: E402
    Network,
    initial_state,
    period_grid,
    steady_state,
)
from fieldtool.core.circuit.spice import spice_netlist  # noqa: E402
from fieldtool.core.circuit.staged import staged_steady_state  # noqa: E402
from fieldtool.core.diagnosis import dictionary  # noqa: E402
from fieldtool.core.diagnosis.dictionary_cache import cache_path, load_or_build, save  # noqa: E402
from fieldtool.core.diagnosis.faults import apply_fault, parse_fault  # noqa: E402

STAGES = (5, 10, 20)
NGSPICE_PERIODS = 8000  # the first run's length, at most (--periods)
NGSPICE_LIMIT_S = 120.0  # per ngspice run
SETTLE_VOLTS = 1e-3


def machine() -> str:
    """CPU model, usable cores, OS, Python and numpy, and whether the kernel is compiled."""
    model = platform.processor() or platform.machine()
    try:
        for line in subprocess.run(["lscpu"], capture_output=True, text=True).stdout.splitlines():
            if line.startswith("Model name:"):
                model = line.split(":", 1)[1].strip()
    except OSError:
        pass
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    solver = "compiled kernel" if kernel.available() else "numpy reference (kernel not built)"
    return (
        f"{model}, {cores} cores, {platform.system()} {platform.release()}, Python "
        f"{platform.python_version()}, numpy {np.__version__}; solver: {solver}"
    )


def load() -> str:
    """The 1, 5 and 15 minute load averages."""
    return "load average " + ", ".join(f"{x:.2f}" for x in os.getloadavg())


def kernel_build_seconds() -> float:
    """Wall time of compiling the kernel as ``pip install`` does (hatch_build.py)."""
    sys.path.insert(0, str(ROOT))
    import hatch_build

    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        hatch_build._compile(ROOT, Path(out))
        return time.perf_counter() - t0


def median_ms(fn, runs: int) -> float:
    """Median wall milliseconds of ``fn()`` after one warm-up call."""
    fn()
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times) * 1e3


def board(stages: int, open_diode: bool):
    """(profile, circuit, params, solve) for a bench ladder, healthy or with an open diode."""
    profile = bench_profile(stages)
    circuit, params = build_circuit(profile)
    if not open_diode:
        return profile, circuit, params, lambda: steady_state(circuit, params)
    fault = parse_fault(f"D{stages}:open", profile)  # stage ⌈N/2⌉'s output diode
    faulted = apply_fault(circuit, params, fault, profile)

    def solve():
        healthy = steady_state(circuit, params)  # as `inject` does: from the healthy board
        return staged_steady_state(circuit, faulted, 80, start=healthy.period)

    return profile, circuit, faulted, solve


def inner_loop(stages: int) -> tuple[float, float, float]:
    """µs per step with and without the monodromy, and Newton iterations per step (10 kHz)."""
    circuit, params = build_circuit(bench_profile(stages))
    x0 = steady_state(circuit, params).period.x_start
    times = period_grid(circuit)
    net = Network(circuit, params)
    inj = net.injections(net.sources_on(times[1:]))
    steps = np.diff(times)
    out = []

    def one(sens: bool):
        v, vj = np.zeros((1, circuit.n)), np.zeros((1, len(circuit.diode_refs)))
        return net.board().period(steps, inj, x0, v, vj, None, sens)

    for sens in (False, True):
        out.append(median_ms(lambda s=sens: one(s), 50) * 1e3 / len(steps))
    its = float(one(False)[4][0]) / len(steps)
    return out[0], out[1], its


def period_averages(t: np.ndarray, v: np.ndarray, period: float, count: int) -> np.ndarray:
    """Average of v over each period (trapezoidal rule on ngspice's own time points)."""
    area = np.concatenate([[0.0], np.cumsum(np.diff(t) * (v[1:] + v[:-1]) / 2)])
    edges = np.interp(np.arange(count + 1) * period, t, area)
    return np.diff(edges) / period


def ngspice_settle(circuit, params, ours: float, workdir: Path) -> str:
    """ngspice's whole-process seconds for a run just long enough to settle within 1 mV.

    Settled means within 1 mV of where ngspice's own output is going (its discretisation is
    not ours): the Aitken Δ² extrapolation of three equally spaced period averages late in a
    long first run (A. C. Aitken, Proc. R. Soc. Edinburgh 46, 1926), as the ngspice tests do.
    The second run lasts just that many periods and is the figure; the text also gives how far
    our steady state is from ngspice's.
    """
    out = circuit.node_names[circuit.output_node - 1].lower()
    x0 = initial_state(circuit, params)

    def run(periods: int) -> tuple[float | None, np.ndarray | None]:
        netlist = spice_netlist(circuit, params, x0, periods, 0, points_per_period=100)
        head, tail = netlist.split("wrdata out.txt ", 1)
        netlist = head + f"wrdata out.txt v({out})" + tail[tail.index("\n") :]
        netlist = netlist.replace(".options ", ".options method=gear ").replace(
            ".control", f".save v({out})\n.control"
        )
        (workdir / "c.cir").write_text(netlist)
        t0 = time.perf_counter()
        try:
            subprocess.run(
                ["ngspice", "-b", "c.cir"], cwd=workdir, capture_output=True, check=True,
                timeout=NGSPICE_LIMIT_S,
            )  # fmt: skip
        except subprocess.TimeoutExpired:
            return None, None
        return time.perf_counter() - t0, np.loadtxt(workdir / "out.txt")

    total = NGSPICE_PERIODS
    wall, data = run(total)
    if data is None:
        return f"> {NGSPICE_LIMIT_S:.0f} s (stopped before {total} periods)"
    avg = period_averages(data[:, 0], data[:, 1], circuit.period_s, total)
    gap = total // 5
    a1, a2, a3 = avg[-1 - 2 * gap], avg[-1 - gap], avg[-1]
    d1, d2 = a2 - a1, a3 - a2
    geometric = d1 * d2 > 0 and abs(d2) < abs(d1)
    settled = a3 - d2 * d2 / (d2 - d1) if geometric else a3
    if abs(settled - a3) > SETTLE_VOLTS:
        return f"> {wall:.1f} s ({abs(settled - a3) * 1e3:.0f} mV to go after {total} periods)"
    periods = int(np.flatnonzero(np.abs(avg - settled) > SETTLE_VOLTS)[-1]) + 1
    wall, _ = run(periods)
    apart = f"ours {abs(ours - settled) * 1e3:.1f} mV from it"
    if wall is None:
        return f"> {NGSPICE_LIMIT_S:.0f} s ({periods} periods; {apart})"
    return f"{wall:.2f} s ({periods} periods; {apart})"


def whole_process(argv: list[str], runs: int, cwd: Path, prepare=None) -> tuple[float, float]:
    """Median wall and CPU seconds of a command as whole processes (after one warm-up run)."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    walls, cpus = [], []
    for i in range(runs + 1):
        if prepare:
            prepare()
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t0 = time.perf_counter()
        subprocess.run(argv, cwd=cwd, env=env, capture_output=True, check=True)
        wall = time.perf_counter() - t0
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
        if i:
            walls.append(wall)
            cpus.append(cpu)
    return statistics.median(walls), statistics.median(cpus)


def dictionary_breakdown(profile) -> list[str]:
    """Where a cold dictionary build spends its CPU, counted at the kernel's entry points.

    Each kernel call is tagged with the solve it belongs to (the staged solve, the meter-in-
    place solves, the variational period): calls, variant-periods, CPU seconds and Newton
    iterations per step, with and without the monodromy. Runs one build with one thread, so
    the CPU seconds add up (the figures in the table below use every core).
    """
    tally: dict[tuple[str, str], list[float]] = {}
    tag = ["staged solve"]
    period, response = kernel.Board.period, kernel.Board.response

    def count(key: tuple[str, str], rows: int, cpu: float, newton: float) -> None:
        entry = tally.setdefault(key, [0, 0, 0.0, 0.0])
        for i, value in enumerate((1, rows, cpu, newton)):
            entry[i] += value

    def timed_period(self, steps, inj, x0, v, vj, guess, sens):
        c0 = time.process_time()
        out = period(self, steps, inj, x0, v, vj, guess, sens)
        what = "periods with monodromy" if sens else "periods without"
        newton = float(out[4].sum()) / len(steps)
        count((tag[0], what), len(x0), time.process_time() - c0, newton)
        return out

    def timed_response(self, steps, *args):
        c0 = time.process_time()
        out = response(self, steps, *args)
        count(("variational period", "periods"), len(out[0]), time.process_time() - c0, 0.0)
        tag[0] = "meter-in-place solves"
        return out

    kernel.Board.period, kernel.Board.response = timed_period, timed_response
    threads = kernel._state.get("threads")
    kernel._state["threads"] = 1
    try:
        c0 = time.process_time()
        dictionary.build(profile)
        total = time.process_time() - c0
    finally:
        kernel.Board.period, kernel.Board.response = period, response
        kernel._state["threads"] = threads
    lines = [f"where a cold build's CPU goes (one thread, {total:.2f} s in all):"]
    for (part, what), (calls, rows, cpu, newton) in tally.items():
        steps = f", {newton / rows:.2f} Newton/step" if newton else ""
        lines.append(f"  {part}, {what}: {calls} calls, {rows} variant-periods, {cpu:.2f} s{steps}")
    kernel_cpu = sum(entry[2] for entry in tally.values())
    lines.append(f"  outside the kernel (numpy, Python, set-up): {total - kernel_cpu:.2f} s")
    return lines


def main() -> None:
    """Print every table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--before", action="store_true", help="time the numpy reference too")
    parser.add_argument("--runs", type=int, default=5, help="runs per whole-process figure")
    parser.add_argument(
        "--periods", type=int, default=8000, help="ngspice's first run, at most (periods)"
    )
    args = parser.parse_args()
    global NGSPICE_PERIODS
    NGSPICE_PERIODS = args.periods
    print(f"machine: {machine()}")
    print(f"at start: {load()}")
    if kernel.available():
        print(f"kernel build (pip install compiles it once): {kernel_build_seconds():.2f} s wall")
    have_spice = shutil.which("ngspice") is not None
    work = Path(tempfile.mkdtemp(prefix="fieldtool-speed-"))

    print("\n1. periodic steady state in process (median of 9; ngspice: one whole run)")
    print(f"{'board':<22}{'fieldtool':>11}{'before':>11}{'shoot':>7}  {'ngspice to settle':<40}")
    targets = {}
    for stages in STAGES:
        for open_diode in (False, True):
            profile, circuit, params, solve = board(stages, open_diode)
            ss = solve()
            ms = median_ms(solve, 9)
            before = "-"
            if args.before:
                with kernel.disabled():
                    before = f"{median_ms(solve, 1):.0f} ms"
            name = f"{stages} stages" + (f", D{stages} open" if open_diode else "")
            target = float(period_average(ss.period)[0, circuit.output_node - 1])
            targets[(stages, open_diode)] = target
            spice = "(ngspice not installed)"
            if have_spice:
                spice = ngspice_settle(circuit, params, target, work)
            print(f"{name:<22}{ms:>8.2f} ms{before:>11}{ss.shooting_iterations:>7}  {spice}")

    print("\n   inner loop (one 80-step period of one variant, 10 kHz drive):")
    for stages in STAGES:
        plain, sens, its = inner_loop(stages)
        print(
            f"   {stages:>2} stages: {plain:.2f} µs/step ({plain / stages:.3f} per stage), "
            f"{sens:.2f} µs/step with the monodromy ({sens / stages:.3f} per stage), "
            f"{its:.2f} Newton iterations/step"
        )

    print(f"\n2. whole processes (median of {args.runs}, wall / CPU)")
    exe = str(Path(sys.executable).with_name("fieldtool"))
    for stages in STAGES:
        path = work / f"bench-{stages}.toml"
        path.write_text(to_toml(bench_ladder(stages)))
        wall, cpu = whole_process([exe, "expect", str(path)], args.runs, work)
        print(f"   fieldtool expect, {stages} stages: {wall:.2f} s / {cpu:.2f} s")
    ten = work / "bench-10.toml"
    readings = work / "readings.csv"
    readings.write_text(f"node,volts\nS5,{targets[(10, False)] / 2:.3f}\n")
    cache = work / "cache"
    diagnose = [exe, "diagnose", str(ten), "--readings", str(readings), "--cache", str(cache)]
    wall, cpu = whole_process(diagnose, args.runs, work, lambda: shutil.rmtree(cache, True))
    print(f"   fieldtool diagnose, 10 stages, cold (dictionary built): {wall:.2f} s / {cpu:.2f} s")
    wall, cpu = whole_process(diagnose, args.runs, work)
    print(f"   fieldtool diagnose, 10 stages, cached: {wall:.2f} s / {cpu:.2f} s")

    print("\n3. 10-stage fault dictionary in process")
    profile = bench_profile(10)
    for line in dictionary_breakdown(profile):
        print(f"   {line}")
    for label, ctx in (("fieldtool", None), ("before", kernel.disabled)):
        if ctx and not args.before:
            continue
        with ctx() if ctx else contextlib.nullcontext():
            c0, w0 = time.process_time(), time.perf_counter()
            d = dictionary.build(profile)
            cpu, wall = time.process_time() - c0, time.perf_counter() - w0
        print(
            f"   {label}: cold {wall:.2f} s wall, {cpu:.2f} s CPU (all threads); "
            f"{len(d.mean)} rows, {len(d.hypotheses)} hypotheses, "
            f"{int(d.meter_solved.sum())} meter-in-place solves, {len(d.failed)} not converged"
        )
    save(d, cache_path(work / "dict", profile))
    loaded = median_ms(lambda: load_or_build(profile, work / "dict"), 20)
    print(f"   from cache: {loaded:.1f} ms median")
    print(f"\nat end: {load()}")
    shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
