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

PART_KINDS = ("diode", "capacitor")
BOARD_TARGETS = ("drive", "supply", "load")
NO_SEVERITY = (math.nan,)  # the grid of a mode without a severity
IDEAL_DIODE_DROP = 0.6  # V, for scaling grids only (common practice, no source)

_EXAMPLES = {"ohms": "47k", "fraction": "0.3", "factor": "3"}


class FaultMode(ABC):
    """One catalogued way for a part or the board to fail (see the module docstring)."""

    name: ClassVar[str]  # as written in a fault spec: D5:open
    applies_to: ClassVar[str]  # "diode" | "capacitor" | "drive" | "supply" | "load"
    unit: ClassVar[str | None]  # severity unit: "ohms" | "fraction" | "factor"; None: none
    words: ClassVar[str]  # plain words: "lost capacitance"

    def available(self, profile: Profile) -> bool:
        """True when the mode can happen on this board (default: always)."""
        return True

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

    def severity_problem(self, value: float) -> str | None:
        """Why a severity cannot be used for this mode, or None when it can."""
        if self.unit == "ohms" and value <= 0:
            return f"{self.name} needs a resistance above 0 ohms"
        if self.unit == "fraction" and not 0 < value < 1:
            return f"{self.name} needs the fraction left, between 0 and 1 (e.g. 0.3)"
        if self.unit == "factor" and value <= 1:
            return f"{self.name} needs a factor above 1 (e.g. 3)"
        return None

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
