"""What every fault mode tells the rest of the tool.

A fault mode is one module with one ``FaultMode`` subclass, registered in
``fieldtool.core.diagnosis.modes``: what it applies to (a diode, a capacitor, or a board target
— the drive, the supply, the load), on which boards it can happen, the severities the fault
dictionary tries (its grid, scaled to the board), how it changes the netlist's element values,
and its words for the technician.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from typing import ClassVar

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.plausible import Range
from fieldtool.core.units import format_si

PART_KINDS = ("diode", "capacitor")
BOARD_TARGETS = ("drive", "supply", "load")
NO_SEVERITY = (math.nan,)  # the grid of a mode without a severity
IDEAL_DIODE_DROP = 0.6  # V, for scaling grids only (common practice, no source)

_EXAMPLES = {"ohms": "47k", "fraction": "0.3", "factor": "3"}

# The plausible severity of each kind (see ``fieldtool.core.plausible``). A leak below 1 Ω
# (what a shorted part is modelled as) is a short: write the mode short. A series resistance
# above 1 TΩ (what an open diode is modelled as) is an open part. With less than 0.1 % of a
# capacitance, the drive or the supply left, it is gone. A load a thousand times its rating is
# a short across the output.
SEVERITY_RANGES = {
    "ohms": Range(1e-3, 1e12, "Ω", "above 1 TΩ in series a part is open: write the mode open"),
    "fraction": Range(
        1e-3,
        1.0,
        "",
        "the fraction left; below 0.001 it is gone: write open, stuck-low or missing",
        high_open=True,
    ),
    "factor": Range(
        1.0,
        1e3,
        "×",
        "a thousand times the rated load is a short across the output",
        low_open=True,
    ),
}
LEAKY_OHMS = Range(
    1.0, 1e18, "Ω", "below the 1 Ω of a shorted part write the mode short; above 1e18 Ω no leak"
)


class FaultMode(ABC):
    """One catalogued way for a part or the board to fail (see the module docstring)."""

    name: ClassVar[str]  # as written in a fault spec: D5:open
    applies_to: ClassVar[str]  # "diode" | "capacitor" | "drive" | "supply" | "load"
    unit: ClassVar[str | None]  # severity unit: "ohms" | "fraction" | "factor"; None: none
    words: ClassVar[str]  # plain words: "lost capacitance"

    def unavailable(self, profile: Profile) -> str | None:
        """Why the mode cannot happen on this board, or None when it can (default: always can).

        A mode whose fault would leave every node as healthy (a low supply on a board whose
        supply is 0 V) is unavailable too, so it is never ranked as a hypothesis.
        """
        return None

    def available(self, profile: Profile) -> bool:
        """True when the mode can happen on this board."""
        return self.unavailable(profile) is None

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """Severities the fault dictionary tries on this board, mild to gross."""
        return NO_SEVERITY

    @abstractmethod
    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """Change ``params`` (every row, in place) as this fault of ``target`` would."""

    @property
    def example(self) -> str:
        """A severity to show in messages."""
        return _EXAMPLES.get(self.unit or "", "")

    @property
    def severity_range(self) -> Range | None:
        """The severities this mode accepts (None: it takes none); see ``SEVERITY_RANGES``."""
        return SEVERITY_RANGES.get(self.unit or "")

    def severity_problem(self, value: float) -> str | None:
        """Why a severity cannot be used for this mode, or None when it can."""
        limit = self.severity_range
        if limit is None:
            return None
        problem = limit.problem(value)
        return f"{self.name} severity {problem}" if problem else None

    def format_severity(self, value: float) -> str:
        """A severity as a fault spec writes it, to six figures: ``47k`` ohms, ``0.3`` of it
        left, a factor ``3``."""
        return format_si(value, digits=6) if self.unit == "ohms" else f"{value:g}"

    def severity_words(self, severity: float, si: str) -> str:
        """The severity in words: ``(47kΩ)``, ``(30% left)``, ``(×3)``; ``si`` is it in SI."""
        if self.unit == "ohms":
            return f"({si}Ω)"
        if self.unit == "fraction":
            return f"({severity:.0%} left)"
        if self.unit == "factor":
            return f"(×{severity:g})"
        return ""


def switching_ohms(profile: Profile) -> float:
    """1/(f·C) of one capacitor: the scale of a pump's per-stage losses (Seeman & Sanders,
    IEEE Trans. Power Electron. 23(2), 2008, slow-switching limit; from memory)."""
    return 1.0 / (profile.frequency_hz * profile.capacitor.farads)


def ideal_output_volts(profile: Profile) -> float:
    """The no-load output of the ideal multiplier (for scaling severity grids)."""
    return topology_of(profile).ideal_output_volts(profile, IDEAL_DIODE_DROP)


def load_ohms_equivalent(profile: Profile) -> float:
    """The load as a resistance: the profile's ohms, or output volts over a constant current."""
    if profile.load_ohms is not None:
        return profile.load_ohms
    amps = profile.load_amps or 0.0
    return abs(ideal_output_volts(profile)) / amps if amps > 0 else 1e9


def drive_sources(circuit: Circuit) -> list[int]:
    """Indices of the drive (or clock) sources."""
    return [i for i, s in enumerate(circuit.sources) if s.kind != "dc"]


def supply_sources(circuit: Circuit) -> list[int]:
    """Indices of the DC supply sources."""
    return [i for i, s in enumerate(circuit.sources) if s.kind == "dc"]


def diode_index(circuit: Circuit, target: str) -> int:
    """Column of a diode by default designator."""
    return circuit.diode_refs.index(target)


def capacitor_index(circuit: Circuit, target: str) -> int:
    """Column of a capacitor by default designator."""
    return circuit.cap_refs.index(target)


def at_most(values: np.ndarray, limit: float) -> np.ndarray:
    """``values`` clipped from above (a copy)."""
    return np.minimum(values, limit)
