"""A board type as frozen data: its parts, drive, load and meter, in SI units.

``fieldtool.core.circuit.profile`` reads and validates these from TOML.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from fieldtool.core.circuit.ranges import LOAD_OHMS
from fieldtool.core.errors import InputError

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
class InstrumentSpec:
    """The instruments beyond the DC voltmeter: AC volts, current, diode test, the scope.

    Defaults are common practice for a handheld true-RMS meter and a 10× passive scope probe
    (no source; values from memory, each overridable in the profile's ``[meter]`` and
    ``[scope]`` tables).
    """

    ac_input_ohms: float = 1e6  # AC volts input resistance, after its DC-blocking capacitor
    ac_input_farads: float = 100e-12  # in parallel with the input resistance
    ac_bandwidth_hz: float = 100e3  # −3 dB frequency of a first-order roll-off
    ac_accuracy_percent: float = 1.0
    ac_accuracy_volts: float = 0.003
    burden_ohms: float = 2.0  # current range shunt and fuse: about 1–2 mV per mA
    current_accuracy_percent: float = 1.0
    current_accuracy_amps: float = 1e-6
    diode_test_amps: float = 1e-3  # test current of the diode-test mode
    diode_test_volts: float = 3.0  # its open-circuit voltage: above it the meter shows OL
    diode_accuracy_percent: float = 1.0
    diode_accuracy_volts: float = 0.002
    diode_settle_s: float = 3.0  # longer than this to settle: "lift one leg"
    probe_ohms: float = 10e6  # scope probe, 10× passive
    probe_farads: float = 12e-12
    scope_accuracy_percent: float = 3.0  # vertical gain accuracy
    scope_accuracy_volts: float = 0.001  # a fraction of a division on the most sensitive range


@dataclass(frozen=True)
class Efforts:
    """What each measurement step costs the technician, in units of one DC reading on a
    powered node (common practice, no source; each overridable in the profile's
    ``[efforts]`` table). The next measurement is chosen by information gain per effort."""

    dc: float = 1.0  # a DC reading on a powered node
    ripple_pp: float = 1.5  # ripple on the scope: change instrument
    ac_rms: float = 1.5  # AC volts: change the meter's mode
    dc_loaded: float = 3.0  # clip a test load on (off, discharged, clip, power up) and read
    current: float = 4.0  # break the supply lead and put the meter in series
    power_off: float = 6.0  # the first power-off check: off, discharge, verify every node
    diode_test: float = 1.0  # each further diode test with the board off
    power_on: float = 2.0  # back to powered readings after power-off: unclip, re-power

    def of(self, quantity: str) -> float:
        """The effort of one reading of a quantity (``dc``, ``ripple-pp``, ...), board as is."""
        return float(getattr(self, quantity.replace("-", "_")))


@dataclass(frozen=True)
class LoadResistor:
    """A test load resistor kept for the board: its resistance and power rating."""

    ohms: float
    rated_watts: float | None = None


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
    instruments: InstrumentSpec = field(default_factory=InstrumentSpec)
    test_loads: tuple[LoadResistor, ...] = ()  # resistors kept for clipping on the output
    efforts: Efforts = field(default_factory=Efforts)  # each measurement step's effort

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
        problem = LOAD_OHMS.problem(ohms)
        if problem:
            raise InputError(f"load {problem}")
        return replace(self, load_ohms=float(ohms), load_amps=None)


def display_name(profile: Profile | None, target: str) -> str:
    """The board's designator for a default one (``D5`` → ``CR105`` if renamed)."""
    if profile is None:
        return target
    return profile.designators.get(target, target)
