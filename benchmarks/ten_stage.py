"""The bench ladders the benchmarks use (benchmark boards, not shipped ones).

DC-fed ladders with a 12 V supply and drive at 10 kHz, 4.7 µF capacitors (±20 %), small-signal
silicon diodes, a 220 kΩ load, a 10 MΩ meter; the diagnosis benchmarks use the 10-stage one.
"""

from __future__ import annotations

from fieldtool.core.circuit.profile import Profile, profile_from_dict

TEN_STAGE = {
    "board": {"name": "bench-dc-ladder-10", "topology": "dc-ladder", "stages": 10},
    "supply": {"volts": 12.0},
    "drive": {"volts": 12.0, "frequency_hz": 10000.0, "source_ohms": 2.0},
    "diode": {"saturation_current_a": 2.52e-9, "emission_coefficient": 1.752, "series_ohms": 0.568},
    "capacitor": {"farads": 4.7e-6, "tolerance": 0.2, "esr_ohms": 0.05},
    "load": {"ohms": 220000.0},
}


def bench_ladder(stages: int) -> dict:
    """The bench ladder with ``stages`` stages, as profile data."""
    data = {name: dict(table) for name, table in TEN_STAGE.items()}
    data["board"].update(name=f"bench-dc-ladder-{stages}", stages=stages)
    return data


def bench_profile(stages: int) -> Profile:
    """The bench ladder with ``stages`` stages as a validated profile."""
    return profile_from_dict(bench_ladder(stages), f"<benchmark: {stages}-stage dc-ladder>")


def ten_stage_profile() -> Profile:
    """The benchmark's 10-stage board as a validated profile."""
    return profile_from_dict(TEN_STAGE, "<benchmark: 10-stage dc-ladder>")
