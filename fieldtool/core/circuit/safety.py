"""Safety figures from the readings taken: highest voltage, stored charge, time to a safe level.

Everything here is an estimate for the technician's judgement, never a clearance. The energy in
each capacitor is ½CV² with V the DC voltage across that capacitor, taken from the node readings
where both of its nodes were read and from the expected values the caller gives (the healthy
board) where they were not; the figures say which capacitors used expected values. The time to
fall below the safe level after power-off comes from ``core.expect.discharge_time`` started from
that charge, through the board's load, bleeder, diodes and capacitor leakage as the profile gives
them: a failed bleeder or an open diode can strand charge far longer, so treat it as a lower
bound and verify with the meter.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.expect import Expectation, discharge_time
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import DEFAULT_SAFE_VOLTS, Profile
from fieldtool.core.circuit.reading_range import node_volts_range
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.hazard import safety_line

# The profile's safe_volts default. 50 V is the shock-protection threshold NFPA 70E uses
# (from memory: check the edition in force before relying on it).
HAZARD_STANDARD = "NFPA 70E"
HAZARD_NOTE = (
    f"{DEFAULT_SAFE_VOLTS:g} V is the {HAZARD_STANDARD} shock threshold "
    "(from memory: check the edition in force)"
)

TEST_LOAD_CAUTION = (
    "Clip a test load on only with the board off and discharged, then power up; use a resistor "
    "rated for the output voltage and for the power shown, keep clear of it while powered, and "
    "discharge again before unclipping it. Local codes and licensed practice come first."
)
POWER_OFF_CAUTION = (
    "Diode tests need the board off: disconnect the supply, discharge every capacitor through a "
    "rated resistor, verify every node reads below {safe:g} V with the meter on DC volts, then "
    "switch to diode test. Re-measure before touching: dielectric absorption can bring back "
    "several percent. Local codes and licensed practice come first."
)


@dataclass(frozen=True)
class CapacitorCharge:
    """The charge one capacitor holds: its voltage, energy, and where the voltage came from."""

    ref: str  # default designator, "C4"
    designator: str  # as the board shows it
    farads: float
    volts: float
    joules: float
    from_readings: bool  # False: at least one of its nodes was not read (expected value used)


@dataclass(frozen=True)
class SafetyFigures:
    """What the readings imply about the danger on the board right now and after power-off."""

    highest_volts: float  # magnitude of the highest node voltage, read or expected
    highest_node: str
    highest_measured: bool  # the highest node was actually read
    overloaded: tuple[str, ...]  # nodes where the meter was over range (at least its range)
    stored_energy_j: float
    capacitors: tuple[CapacitorCharge, ...]
    discharge_s: float  # power-off to every node below safe_volts; inf if never
    safe_volts: float
    threshold_source: str  # where the safe level comes from, in words
    hazard_nodes: tuple[str, ...]  # nodes read (or expected, when unread) above safe_volts

    @property
    def estimated(self) -> tuple[str, ...]:
        """Capacitors whose voltage used expected values for an unread node."""
        return tuple(c.designator for c in self.capacitors if not c.from_readings)

    @property
    def warning(self) -> str:
        """The standing safety line for these figures (WARNING at or above the safe level)."""
        return safety_line(None if self.overloaded else self.highest_volts, self.safe_volts)

    @property
    def all_from_readings(self) -> bool:
        """True when every capacitor's voltage came from readings alone."""
        return not self.estimated


def threshold_source(profile: Profile) -> str:
    """Where the profile's safe level comes from, in words for the screen."""
    if profile.safe_volts == DEFAULT_SAFE_VOLTS:
        return HAZARD_NOTE
    return f"{profile.safe_volts:g} V set by the board profile ({HAZARD_NOTE})"


def above_threshold(volts: float | None, safe_volts: float) -> bool:
    """True when a node voltage (None: over the meter's range) is at or above the safe level."""
    return volts is None or abs(volts) >= safe_volts


def expected_volts(expectation: Expectation) -> dict[str, float]:
    """Node → expected DC volts with no meter on the board, from a full expectation."""
    return {n.node: n.unloaded_volts for n in expectation.nodes}


def node_hazard(
    node: str,
    expected: Mapping[str, float],
    readings: Mapping[str, float | None],
    safe_volts: float,
) -> bool:
    """True when the node is above the hazard threshold: as read, or as expected if unread."""
    if node in readings:
        return above_threshold(readings[node], safe_volts)
    return above_threshold(expected[node], safe_volts)


def _source_average(profile: Profile, kind: str) -> float:
    """DC average of a source terminal while the board runs (50 % duty square, zero-mean sine)."""
    if kind == "dc":
        return profile.supply_volts
    return topology_of(profile).drive_average(profile)


def node_voltages(
    profile: Profile, expected: Mapping[str, float], readings: Mapping[str, float | None]
) -> tuple[dict[str, float], set[str]]:
    """Every circuit node's DC volts (readings first, expected otherwise) and the nodes read.

    An overload reading gives no number, so its node falls back to the expected value and does
    not count as read; so does a value no node of the board could show (a wrong range or unit,
    which an older version may have stored).
    """
    circuit, _ = build_circuit(profile)
    plausible = node_volts_range(profile)
    volts: dict[str, float] = {}
    read: set[str] = set()
    for node in (circuit.name(i) for i in circuit.probe_nodes):
        value = readings.get(node)
        if value is not None and plausible.contains(value):
            volts[node] = float(value)
            read.add(node)
        else:
            volts[node] = float(expected[node])
    for s in circuit.sources:
        name = circuit.name(s.node)
        if name not in volts:
            volts[name] = _source_average(profile, s.kind)
            read.add(name)  # set by the source itself, not a guess about the board
    return volts, read


def safety_figures(
    profile: Profile, expected: Mapping[str, float], readings: Mapping[str, float | None]
) -> SafetyFigures:
    """Highest voltage, stored energy (½CV²) and time to the safe level, from the readings.

    ``expected`` maps every probe node to its expected DC volts (``expected_volts`` of an
    expectation, or the healthy centre of each band); ``readings`` maps node name → volts read
    (None where the meter was over range).
    """
    circuit, params = build_circuit(profile)
    volts, read = node_voltages(profile, expected, readings)
    volts["GND"] = 0.0
    read.add("GND")
    x_on = np.zeros(len(circuit.cap_refs))
    charges = []
    for j, ref in enumerate(circuit.cap_refs):
        a, b = (circuit.name(int(i)) for i in circuit.cap_nodes[j])
        x_on[j] = volts[a] - volts[b]
        farads = float(params.c_f[0, j])
        if j >= len(circuit.cap_refs) - circuit.stray_caps:
            continue  # stray capacitance: part of the state, not a part to warn about
        charges.append(
            CapacitorCharge(
                ref=ref,
                designator=display_name(profile, ref),
                farads=farads,
                volts=float(x_on[j]),
                joules=0.5 * farads * float(x_on[j]) ** 2,
                from_readings=a in read and b in read,
            )
        )
    probed = [circuit.name(i) for i in circuit.probe_nodes]
    overloaded = tuple(n for n in probed if n in readings and readings[n] is None)
    highest = max(probed, key=lambda n: abs(volts[n]))
    safe = profile.safe_volts
    hazards = tuple(n for n in probed if node_hazard(n, volts, readings, safe))
    return SafetyFigures(
        highest_volts=abs(volts[highest]),
        highest_node=highest,
        highest_measured=highest in read,
        overloaded=overloaded,
        stored_energy_j=float(sum(c.joules for c in charges)),
        capacitors=tuple(charges),
        discharge_s=discharge_time(circuit, params, x_on, profile.safe_volts),
        safe_volts=profile.safe_volts,
        threshold_source=threshold_source(profile),
        hazard_nodes=hazards,
    )


def format_duration(seconds: float) -> str:
    """A short human duration: ``0 s``, ``4.2 s``, ``3 min 10 s``, ``more than a day``."""
    if not math.isfinite(seconds) or seconds > 86400:
        return "more than a day"
    if seconds < 60:
        return f"{seconds:.2g} s" if seconds < 10 else f"{seconds:.0f} s"
    minutes, sec = divmod(int(round(seconds)), 60)
    if minutes < 60:
        return f"{minutes} min {sec} s"
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes} min"
