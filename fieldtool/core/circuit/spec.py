"""A board type as frozen data: its parts, drive, load and meter, in SI units.

``fieldtool.core.circuit.profile`` reads and validates these from TOML.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

from fieldtool.core.errors import ProfileError

POLARITIES = ("positive", "negative")
DIODE_FAMILIES = ("general", "rectifier", "small-signal")
DIELECTRICS = ("aluminium-electrolytic", "ceramic")
ELECTROLYTIC_FROM_FARADS = 1e-6  # default dielectric by value (common practice, no source)
WAVEFORMS = ("square", "sine")
THERMAL_VOLTS_PER_KELVIN = 8.617333262e-5  # Boltzmann constant / electron charge (CODATA 2018)
DEFAULT_SAFE_VOLTS = 50.0  # NFPA 70E shock threshold (from memory: check the edition in force)


@dataclass(frozen=True)
class DiodeSpec:
    """Shockley diode with series resistance and a parallel leakage conductance."""

    saturation_current_a: float
    emission_coefficient: float
    series_ohms: float
    leakage_siemens: float = 1e-12  # SPICE GMIN across each junction (Nagel, SPICE2, 1975)
    family: str = "general"  # for failure-mode priors: general | rectifier | small-signal


@dataclass(frozen=True)
class CapacitorSpec:
    """A capacitor with its tolerance, equivalent series resistance and leakage."""

    farads: float
    tolerance: float
    esr_ohms: float = 0.0
    leakage_ohms: float = 1e10
    dielectric: str = "aluminium-electrolytic"  # for failure-mode priors; or "ceramic"


@dataclass(frozen=True)
class Profile:
    """Everything the tool knows about one board type."""

    path: str
    name: str
    description: str
    topology: str
    polarity: str
    stages: int
    supply_volts: float
    supply_ohms: float
    drive_volts: float
    drive_low_volts: float
    frequency_hz: float
    drive_ohms: float
    waveform: str
    edge_fraction: float
    diode: DiodeSpec
    capacitor: CapacitorSpec
    load_ohms: float | None
    load_amps: float | None
    bleeder_ohms: float | None
    meter_ohms: float
    meter_percent: float
    meter_volts: float
    temperature_c: float
    safe_volts: float
    stray_farads: float
    drive_tolerance: float
    diode_overrides: dict[str, DiodeSpec] = field(default_factory=dict)
    capacitor_overrides: dict[str, CapacitorSpec] = field(default_factory=dict)
    designators: dict[str, str] = field(default_factory=dict)
    labels: dict[str, str] = field(default_factory=dict)
    digest: str = ""
    meter_range_volts: float | None = None  # beyond it the meter shows overload; None: no limit

    @property
    def thermal_volts(self) -> float:
        """kT/q at the profile's temperature."""
        return THERMAL_VOLTS_PER_KELVIN * (self.temperature_c + 273.15)

    @property
    def period_s(self) -> float:
        """One period of the drive."""
        return 1.0 / self.frequency_hz

    def with_load_ohms(self, ohms: float) -> Profile:
        """The same board with a resistive load of ``ohms``."""
        if not (ohms > 0 and math.isfinite(ohms)):
            raise ProfileError(f"load of {ohms!r} ohms: expected a positive number of ohms")
        return replace(self, load_ohms=float(ohms), load_amps=None)


def display_name(profile: Profile | None, target: str) -> str:
    """The board's designator for a default one (``D5`` → ``CR105`` if renamed)."""
    if profile is None:
        return target
    return profile.designators.get(target, target)
