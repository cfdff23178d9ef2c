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
SHORT_OHMS = 1.0  # a failed-short part reads about an ohm (common practice, no source)
# Shorts from a burnt part (ohms) to a welded one (milliohms), mild to gross, five points
# evenly spaced in log from 10 Ω to 10 mΩ (a factor of about 5.6 apart; common practice, no
# source): each short costs five variants in the fault dictionary.
SHORT_GRID_OHMS = (10.0, 1.78, 0.316, 0.0562, 0.01)
SHORT_MAX_OHMS = 100.0  # above this a part is leaky, not shorted

_EXAMPLES = {"ohms": "47k", "fraction": "0.3", "factor": "3"}


class FaultMode(ABC):
    """One catalogued way for a part or the board to fail (see the module docstring)."""

    name: ClassVar[str]  # as written in a fault spec: D5:open
    applies_to: ClassVar[str]  # "diode" | "capacitor" | "drive" | "supply" | "load"
    unit: ClassVar[str | None]  # severity unit: "ohms" | "fraction" | "factor"; None: none
    words: ClassVar[str]  # plain words: "lost capacitance"
    default_severity: ClassVar[float | None] = None  # used when a spec gives none (else needed)

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


class ShortMode(FaultMode):
    """A part shorted: a low resistance across it, both ways.

    How low varies from part to part and failure to failure (milliohms for a welded junction
    or a metallised short, ohms for a burnt one), and what the board reads depends on it
    wherever the short is comparable with the source resistances around it; so the dictionary
    tries a range (``SHORT_GRID_OHMS``), marginalised like any other severity. A spec without
    a value (``D5:short``) means a typical short of ``SHORT_OHMS``.
    """

    name = "short"
    unit = "ohms"
    words = "shorted"
    default_severity = SHORT_OHMS

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """10 Ω down to 10 mΩ, five points (mild to gross; ``SHORT_GRID_OHMS``)."""
        return SHORT_GRID_OHMS

    def severity_problem(self, value: float) -> str | None:
        """A short is above 0 and at most 100 Ω; above that it is a leak."""
        if not 0 < value <= SHORT_MAX_OHMS:
            return (
                f"{self.name} needs a resistance above 0 and at most {SHORT_MAX_OHMS:g} ohms "
                f"(e.g. 50m); a higher one is a leak: use leaky"
            )
        return None

    @staticmethod
    def siemens(severity: float | None) -> float:
        """The short's conductance: 1/``severity``, or 1/``SHORT_OHMS`` when none is given."""
        return 1.0 / (SHORT_OHMS if severity is None else severity)


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
