"""Terminal UI speed: start-up to a usable probing screen, and one reading to updated panels.

    python benchmarks/tui_speed.py [--runs 5] [--profile profiles/tidegauge-apd-bias.toml]

1. Start-up: a fresh Python process imports the app, opens the board (dictionary from a warm
   cache) headless at 80×24 and reports when the probing screen shows its node table and
   suspects. Measured from process launch by the parent. Target ≤ 1.5 s.
2. Reading: in one running app, a typed reading is accepted (saved to the history writer, the
   diagnosis recomputed, table, ladder, suspects and next node updated) and the screen
   repainted. Median and worst over every node of the board. Target ≤ 100 ms.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

SAFETY_MS = 0
CHILD = """
import asyncio, sys
from fieldtool.core.circuit.profile import load_profile
from fieldtool.tui.app import SessionRequest, make_app
from fieldtool.tui.meter_strip import MeterChoice
from fieldtool.tui.probing import ProbingScreen

async def main():
    profile = load_profile(sys.argv[1])
    request = SessionRequest(profile, "BENCH-1", MeterChoice(), resume=False)
    app = make_app(logs_dir=sys.argv[2], request=request, cache_dir=sys.argv[3])
    async with app.run_test(size=(80, 24)) as pilot:
        while not (isinstance(app.screen, ProbingScreen) and app.screen.is_mounted):
            await pilot.pause(0.005)
        await pilot.pause()
        print("ready", flush=True)
        app.exit()

asyncio.run(main())
"""


def startup_runs(profile: str, cache: str, runs: int) -> list[float]:
    """Seconds from process launch to a usable probing screen, one fresh process a run."""
    times = []
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    for _ in range(runs):
        with tempfile.TemporaryDirectory() as logs:
            t0 = time.perf_counter()
            proc = subprocess.Popen(
                [sys.executable, "-c", CHILD, profile, logs, cache],
                stdout=subprocess.PIPE,
                text=True,
                env=env,
                cwd=ROOT,
            )
            line = proc.stdout.readline()
            t1 = time.perf_counter()
            proc.wait(timeout=60)
            if line.strip() != "ready":
                raise SystemExit(f"start-up run failed (exit {proc.returncode})")
            times.append(t1 - t0)
    return times


async def reading_runs(profile_path: str, cache: str) -> tuple[list[float], list[float]]:
    """(accept-and-update seconds, accept-update-and-repaint seconds) for every node."""
    from fieldtool.core.circuit.expect import expect
    from fieldtool.core.circuit.profile import load_profile
    from fieldtool.core.diagnosis.faults import parse_fault
    from fieldtool.core.measurement import DC, TYPED, Measurement
    from fieldtool.tui.app import SessionRequest, make_app
    from fieldtool.tui.meter_strip import MeterChoice
    from fieldtool.tui.node_table import NodeTable
    from fieldtool.tui.probing import SAFETY_DELAY_S, ProbingScreen

    global SAFETY_MS
    SAFETY_MS = int(SAFETY_DELAY_S * 1000)
    profile = load_profile(profile_path)
    truth = {n.node: n.volts for n in expect(profile, fault=parse_fault("C6:short", profile)).nodes}
    update, repaint, safety = [], [], []
    with tempfile.TemporaryDirectory() as logs:
        request = SessionRequest(profile, "BENCH-2", MeterChoice(), resume=False)
        app = make_app(logs_dir=logs, request=request, cache_dir=cache)
        async with app.run_test(size=(120, 40)) as pilot:
            while not isinstance(app.screen, ProbingScreen):
                await pilot.pause(0.01)
            screen = app.screen
            await pilot.pause(0.5)
            idle = []
            for node in screen.session.dictionary.nodes:
                screen.query_one(NodeTable).select(node)
                await pilot.pause()
                t0 = time.perf_counter()
                await pilot.pause()
                idle.append(time.perf_counter() - t0)
                t0 = time.perf_counter()
                screen.take(Measurement(node, DC, truth[node], TYPED, settled=True))
                t1 = time.perf_counter()
                await pilot.pause()
                t2 = time.perf_counter()
                update.append(t1 - t0)
                repaint.append(t2 - t0)
                while not screen.safety_current:
                    await pilot.pause(0.01)
                safety.append(time.perf_counter() - t0)
            app.writer.drain()
    print(f"(a pilot pause with nothing to do: {ms(idle)})")
    print(
        f"safety strip recomputed after a reading (worker, {SAFETY_MS} ms debounce): {ms(safety)}"
    )
    return update, repaint


def ms(values: list[float]) -> str:
    """Median and worst in milliseconds."""
    return f"median {statistics.median(values) * 1e3:.0f} ms, worst {max(values) * 1e3:.0f} ms"


def main() -> None:
    """Run both measurements and print them with the machine."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5)
    parser.add_argument(
        "--profile", default=str(ROOT / "fieldtool" / "profiles" / "tidegauge-apd-bias.toml")
    )
    args = parser.parse_args()
    from fieldtool.core.circuit.profile import load_profile
    from fieldtool.core.diagnosis.dictionary_cache import load_or_build

    with tempfile.TemporaryDirectory() as cache:
        t0 = time.perf_counter()
        load_or_build(load_profile(args.profile), cache_dir=cache)
        cold = time.perf_counter() - t0
        start = startup_runs(args.profile, cache, args.runs)
        update, repaint = asyncio.run(reading_runs(args.profile, cache))
    print(
        f"machine: {platform.machine()}, {os.cpu_count()} cores, {platform.platform()}, "
        f"Python {platform.python_version()}"
    )
    print(f"profile: {Path(args.profile).name}; cold dictionary build {cold:.2f} s (not counted)")
    print(f"start-up to probing screen ({args.runs} fresh processes): {ms(start)}; target 1500 ms")
    print(f"reading accepted to table, suspects and next node ({len(update)} nodes): {ms(update)}")
    print(f"  ... and the screen repainted: {ms(repaint)}; target 100 ms")


if __name__ == "__main__":
    main()
