"""How the default settle rule does on the simulated meter: time to settle and error left.

For each shipped profile, healthy and with a few faults, the probe walks the nodes in ladder
order (each landing starts from the previous node's reading) and ``settle`` runs with the
default rule on a fake clock (simulated seconds, so the figures do not depend on the machine).
Reports per board and fault: nodes settled within the rule's timeout, median and worst time to
settle, and the worst |settled value − core expectation| as a fraction of the meter accuracy.
Run: ``python benchmarks/sim_settle.py``.
"""

from __future__ import annotations

import statistics
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from fieldtool.core.circuit.profile import load_profile  # noqa: E402
from fieldtool.meters.settings import SettleRule  # noqa: E402
from fieldtool.meters.settle import settle  # noqa: E402
from fieldtool.meters.simulated import SimulatedMeter  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
FAULTS = {
    "tidegauge-apd-bias": [None, "D5:open", "C4:short", "C6:lowcap=0.3"],
    "windmast-geiger-ac4": [None, "D3:open", "C2:esr=47"],
    "driftbuoy-sonar-neg5": [None, "D4:open", "C3:leaky=100k"],
    "datalogger-eeprom-dickson": [None, "D2:open", "drive:low=0.5"],
}


class FakeClock:
    """Simulated seconds."""

    def __init__(self) -> None:
        self.t = 0.0

    def __call__(self) -> float:
        return self.t

    def sleep(self, seconds: float) -> None:
        self.t += seconds


def walk(profile, fault: str | None, rule: SettleRule) -> tuple[int, list[float], float, int]:
    """Settle at every node in turn; (settled, times, worst error/accuracy, nodes)."""
    clock = FakeClock()
    meter = SimulatedMeter(profile, fault, seed=1, clock=clock, sleep=clock.sleep)
    expectation = meter.expectation
    settled, times, worst = 0, [], 0.0
    for node in expectation.nodes:
        meter.place_probe(node.node)
        start = clock()
        result = settle(meter.read, rule, clock=clock)
        times.append(clock() - start)
        settled += result.settled
        accuracy = profile.meter_percent / 100 * abs(node.volts) + profile.meter_volts
        if result.value is not None:
            worst = max(worst, abs(result.value - node.volts) / accuracy)
    return settled, times, worst, len(expectation.nodes)


def main() -> None:
    """Print one row per board and fault."""
    rule = SettleRule()
    print(f"settle rule: {rule.count} readings within {rule.percent} % + {rule.volts} V,")
    print(f"timeout {rule.timeout_s} s; simulated seconds\n")
    print("| board | fault | settled | median s | worst s | worst error / accuracy |")
    print("|---|---|---:|---:|---:|---:|")
    for path in sorted((ROOT / "fieldtool" / "profiles").glob("*.toml")):
        profile = load_profile(path)
        for fault in FAULTS.get(profile.name, [None]):
            settled, times, worst, n = walk(profile, fault, rule)
            print(
                f"| {profile.name} | {fault or 'healthy'} | {settled}/{n} "
                f"| {statistics.median(times):.2f} | {max(times):.2f} | {worst:.2f} |"
            )


if __name__ == "__main__":
    main()
