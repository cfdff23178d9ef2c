"""What every multiplier topology tells the rest of the tool.

A topology is one module with one ``Topology`` subclass, registered in
``fieldtool.core.circuit.topologies``. It knows its parts and nodes by default designator, its
netlist as named connections (the solver's matrices are built from them generically in
``netlist.build_circuit``), a starting charge for the solver, its ideal output, which profile
settings make sense for it, and how its ladder is drawn. It imports nothing but the profile
spec, so the netlist, the solver, the fault modes and the UI may all ask it.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from fieldtool.core.circuit.spec import Profile

GROUND = "GND"


@dataclass(frozen=True)
class Layout:
    """A board's netlist as named connections, before any matrix is built.

    Diodes are (designator, anode, cathode) for positive polarity (a negative board turns them
    round); capacitors (designator, positive, negative terminal); sources (name, node, waveform
    kind: ``dc``, ``square``, ``square-inverted`` or ``sine``). Node ``GND`` is ground.
    """

    diodes: tuple[tuple[str, str, str], ...]
    capacitors: tuple[tuple[str, str, str], ...]
    sources: tuple[tuple[str, str, str], ...]
    output: str
    stray_nodes: tuple[str, ...] = ()  # nodes that get a stray capacitance to ground


@dataclass(frozen=True)
class ChainCell:
    """One node along the diode chain as drawn: the capacitors above and below it."""

    node: str  # GND where the chain starts at ground (not probeable)
    up: str | None  # default designator of the capacitor drawn above (toward the drive)
    down: str | None  # drawn below (toward ground or the previous stage)


@dataclass(frozen=True)
class StartCharge:
    """What the ideal relations need to guess each capacitor's charge at t = 0 (per variant)."""

    vin: np.ndarray  # (B,) DC input (0 where there is none)
    high: np.ndarray  # (B,) drive high level (AC: peak)
    low: np.ndarray  # (B,) drive low level (AC: −peak)
    diode_drop: np.ndarray  # (B,) a typical forward drop
    polarity: int  # +1 or −1


class Topology(ABC):
    """One way of building a multiplier (see the module docstring)."""

    name: ClassVar[str]
    words: ClassVar[str]  # plain words for a technician
    dc_input: ClassVar[bool]  # the board has a DC supply input (node S0)
    ac_drive: ClassVar[bool]  # the drive is AC swinging ±peak (else a square wave low…high)
    waveforms: ClassVar[tuple[str, ...]]  # drive waveforms it accepts, default first
    polarities: ClassVar[tuple[str, ...]] = ("positive", "negative")
    legend: ClassVar[str]  # where the capacitors drawn above and below the chain go

    @abstractmethod
    def diodes(self, stages: int) -> list[str]:
        """Default designators of the diodes, in chain order."""

    @abstractmethod
    def capacitors(self, stages: int) -> list[str]:
        """Default designators of the capacitors (parts, not strays)."""

    @abstractmethod
    def nodes(self, stages: int) -> list[str]:
        """Names of the nodes a technician can probe, in ladder order."""

    @abstractmethod
    def layout(self, profile: Profile) -> Layout:
        """The board's netlist as named connections."""

    @abstractmethod
    def start_charge(self, capacitors: tuple[str, ...], start: StartCharge) -> np.ndarray:
        """Capacitor voltages (B, m) at t = 0 from the ideal relations (a Newton start)."""

    @abstractmethod
    def ideal_output_volts(self, profile: Profile, diode_drop: float) -> float:
        """The no-load output of the ideal multiplier with constant-drop diodes."""

    @abstractmethod
    def chain(self, stages: int) -> list[ChainCell]:
        """The nodes along the diode chain as drawn, diode k leaving cell k."""

    def designators(self, stages: int) -> list[str]:
        """Every part's default designator: diodes first, then capacitors."""
        return self.diodes(stages) + self.capacitors(stages)

    def drive_low_level(self, profile: Profile) -> float:
        """The drive's low level: −peak for an AC drive, else the profile's low volts."""
        return -profile.drive_volts if self.ac_drive else profile.drive_low_volts

    def drive_average(self, profile: Profile) -> float:
        """The DC average of the drive terminal while the board runs (50 % duty square)."""
        if self.ac_drive:
            return 0.0
        return 0.5 * (profile.drive_volts + profile.drive_low_volts)
