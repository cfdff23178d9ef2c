"""The 10-stage DC-fed ladder the diagnosis benchmarks use (a benchmark board, not a shipped one).

Same parts and drive as ``solver_speed.py``'s ladders: 12 V supply and drive at 10 kHz, 4.7 µF
capacitors (±20 %), small-signal silicon diodes, a 220 kΩ load, a 10 MΩ meter.
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


def ten_stage_profile() -> Profile:
    """The benchmark's 10-stage board as a validated profile."""
    return profile_from_dict(TEN_STAGE, "<benchmark: 10-stage dc-ladder>")
