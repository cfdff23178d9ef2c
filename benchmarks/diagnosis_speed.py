"""Fault dictionary and ranking speed on the 10-stage DC-fed ladder, on one core.

Measures: the dictionary built cold (process CPU time and wall, BLAS held to one thread and
the process pinned to one CPU), where that time goes (cProfile, cumulative), the dictionary
loaded from the disk cache (median of repeated loads), and one new reading to an updated
ranking and next probe (``diagnose()`` wall time, median over realistic guided probing
sequences on a few faults). Targets: cold ≤ 1 s (issue 14), cache ≤ 50 ms, per reading ≤ 20 ms.
Run: ``python benchmarks/diagnosis_speed.py``.
"""

from __future__ import annotations

import os

# One core: BLAS thread pools are sized when numpy loads, so this must come first.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import cProfile  # noqa: E402
import platform  # noqa: E402
import pstats  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from ten_stage import ten_stage_profile  # noqa: E402

from fieldtool.core.circuit.expect import expect  # noqa: E402
from fieldtool.core.diagnosis import dictionary  # noqa: E402
from fieldtool.core.diagnosis.dictionary_cache import cache_path, load_or_build, save  # noqa: E402
from fieldtool.core.diagnosis.faults import parse_fault  # noqa: E402
from fieldtool.core.diagnosis.ranking import diagnose  # noqa: E402
from fieldtool.core.measurement import DC, TYPED, Measurement  # noqa: E402

FAULTS = ("D7:open", "D12:short", "C9:open", "C14:short", "C6:lowcap=0.2", "drive:low=0.75")
CACHE_LOADS = 20


def machine() -> str:
    """CPU model, cores, Python and numpy versions."""
    model = platform.processor() or platform.machine()
    try:
        text = subprocess.run(["lscpu"], capture_output=True, text=True, check=True).stdout
        for line in text.splitlines():
            if line.startswith("Model name:"):
                model = line.split(":", 1)[1].strip()
    except (OSError, subprocess.CalledProcessError):
        pass
    cores = os.cpu_count()
    return (
        f"{model}, {cores} cores, {platform.system()} {platform.release()}, "
        f"Python {platform.python_version()}, numpy {np.__version__}"
    )


def pin_one_core() -> str:
    """Pin this process to one CPU where the OS allows it."""
    if hasattr(os, "sched_setaffinity"):
        cpu = min(os.sched_getaffinity(0))
        os.sched_setaffinity(0, {cpu})
        return f"pinned to CPU {cpu}"
    return "not pinned (no sched_setaffinity)"


def cold_build(profile):
    """Build once plainly (timed) and once under cProfile (where the time goes)."""
    c0, w0 = time.process_time(), time.perf_counter()
    d = dictionary.build(profile)
    cpu, wall = time.process_time() - c0, time.perf_counter() - w0
    prof = cProfile.Profile()
    prof.enable()
    dictionary.build(profile)
    prof.disable()
    stats = pstats.Stats(prof)
    parts = {}
    for (file, _, name), (_, _, _, cum, _) in stats.stats.items():  # type: ignore[attr-defined]
        if name in ("steady_state", "linear_response", "_solve_with_meter", "run_period", "_damp"):
            if "fieldtool" in file:
                parts[name] = parts.get(name, 0.0) + cum
    return d, cpu, wall, parts


def per_reading_times(d, profile) -> list[float]:
    """diagnose() wall time after each new reading along guided probing sequences."""
    times = []
    for spec in FAULTS:
        e = expect(profile, fault=parse_fault(spec, profile))
        truth = {n.node: n.volts for n in e.nodes}
        readings: list[Measurement] = []
        result = diagnose(d, readings)
        while result.next_probe is not None:
            readings.append(Measurement(result.next_probe, DC, truth[result.next_probe], TYPED))
            t0 = time.perf_counter()
            result = diagnose(d, readings)
            times.append(time.perf_counter() - t0)
    return times


def main() -> None:
    """Print the machine and the three figures against their targets."""
    print(f"machine: {machine()}")
    print(f"one core: BLAS threads 1, {pin_one_core()}")
    profile = ten_stage_profile()
    d, cpu, wall, parts = cold_build(profile)
    rows, hyps, nodes = len(d.mean), len(d.hypotheses), len(d.nodes)
    print(
        f"board: {profile.name} ({profile.stages} stages, {nodes} probe nodes), "
        f"{hyps} hypotheses, {rows} dictionary rows, {len(d.failed)} fault rows not converged"
    )
    print(f"\ncold build: {cpu:.2f} s CPU, {wall:.2f} s wall (target 1 s)")
    print("  where it goes (second build under cProfile; the calls nest: run_period inside")
    print("  steady_state, the meter solve's steady_state and _damp inside _solve_with_meter):")
    for name, seconds in sorted(parts.items(), key=lambda kv: -kv[1]):
        print(f"    {name:<18} {seconds:6.2f} s cumulative")

    with tempfile.TemporaryDirectory() as folder:
        save(d, cache_path(folder, profile))
        loads = []
        for _ in range(CACHE_LOADS):
            t0 = time.perf_counter()
            again = load_or_build(profile, folder)
            loads.append(time.perf_counter() - t0)
        assert again.mean.shape == d.mean.shape
    print(
        f"from cache: median {statistics.median(loads) * 1e3:.1f} ms, "
        f"max {max(loads) * 1e3:.1f} ms over {CACHE_LOADS} loads (target 50 ms)"
    )

    times = per_reading_times(d, profile)
    print(
        f"per reading (diagnose): median {statistics.median(times) * 1e3:.1f} ms, "
        f"90th percentile {np.percentile(times, 90) * 1e3:.1f} ms, max {max(times) * 1e3:.1f} ms "
        f"over {len(times)} readings in {len(FAULTS)} guided sequences (target 20 ms)"
    )


if __name__ == "__main__":
    main()
