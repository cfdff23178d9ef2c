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
SHORT_OHMS = 1.0  # a failed-short part reads about an ohm (common practice, no source)
# Shorts from a burnt part (ohms) to a welded one (milliohms), mild to gross, five points
# evenly spaced in log from 10 Ω to 10 mΩ (a factor of about 5.6 apart; common practice, no
# source): each short costs five variants in the fault dictionary.
SHORT_GRID_OHMS = (10.0, 1.78, 0.316, 0.0562, 0.01)
SHORT_MAX_OHMS = 100.0  # above this a part is leaky, not shorted

_EXAMPLES = {"ohms": "47k", "fraction": "0.3", "factor": "3"}

# The plausible severity of each kind (see ``fieldtool.core.plausible``). A series resistance
# above 1 TΩ (what an open diode is modelled as) is an open part. With less than 0.1 % of a
# capacitance, the drive or the supply left, it is gone. A load a thousand times its rating is
# a short across the output. A short is at most SHORT_MAX_OHMS and a leak above it; below
# 0.1 mΩ a short is less than a part's own leads (common practice, no source).
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
SHORT_RANGE = Range(
    1e-4,
    SHORT_MAX_OHMS,
    "Ω",
    f"above {SHORT_MAX_OHMS:g} Ω a part leaks rather than shorts: use leaky; below 0.1 mΩ is "
    "less than the part's own leads",
)
LEAKY_OHMS = Range(
    SHORT_MAX_OHMS,
    1e18,
    "Ω",
    f"at {SHORT_MAX_OHMS:g} Ω or less a part is shorted: use short; above 1e18 Ω it does not leak",
    low_open=True,
)


class FaultMode(ABC):
    """One catalogued way for a part or the board to fail (see the module docstring)."""

    name: ClassVar[str]  # as written in a fault spec: D5:open
    applies_to: ClassVar[str]  # "diode" | "capacitor" | "drive" | "supply" | "load"
    unit: ClassVar[str | None]  # severity unit: "ohms" | "fraction" | "factor"; None: none
    words: ClassVar[str]  # plain words: "lost capacitance"
    default_severity: ClassVar[float | None] = None  # used when a spec gives none (else needed)

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
    severity_range = SHORT_RANGE

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """10 Ω down to 10 mΩ, five points (mild to gross; ``SHORT_GRID_OHMS``)."""
        return SHORT_GRID_OHMS

    @staticmethod
    def siemens(severity: float | None) -> float:
        """The short's conductance: 1/``severity``, or 1/``SHORT_OHMS`` when none is given."""
        return 1.0 / (SHORT_OHMS if severity is None else severity)


class DriveStuckMode(FaultMode):
    """The square drive held at one of its levels (``held``: "high" or "low")."""

    applies_to = "drive"
    unit = None
    held: ClassVar[str]

    def unavailable(self, profile: Profile) -> str | None:
        """Square-driven boards only."""
        if not topology_of(profile).ac_drive:
            return None
        return "the drive here is an AC input: try missing or low"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """Each drive source's other level set to the held one."""
        for i in drive_sources(circuit):
            if self.held == "high":
                params.s_low[:, i] = params.s_high[:, i]
            else:
                params.s_high[:, i] = params.s_low[:, i]


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
