"""Every catalogued fault mode, one module each, registered here in catalog order.

To add one: a module with a ``FaultMode`` subclass (see ``base``), its instance in ``MODES``
below, its prior share in ``fieldtool.core.diagnosis.priors`` (with the source), a row in the
README's fault catalog, and an ngspice check that simulates the same fault. Bump
``fieldtool.core.diagnosis.dictionary.DICTIONARY_VERSION`` so old caches are rebuilt.
"""

from __future__ import annotations

from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import BOARD_TARGETS, PART_KINDS, FaultMode
from fieldtool.core.diagnosis.modes.capacitor_esr import CapacitorEsr
from fieldtool.core.diagnosis.modes.capacitor_leaky import CapacitorLeaky
from fieldtool.core.diagnosis.modes.capacitor_lowcap import CapacitorLowCap
from fieldtool.core.diagnosis.modes.capacitor_open import CapacitorOpen
from fieldtool.core.diagnosis.modes.capacitor_short import CapacitorShort
from fieldtool.core.diagnosis.modes.diode_leaky import DiodeLeaky
from fieldtool.core.diagnosis.modes.diode_open import DiodeOpen
from fieldtool.core.diagnosis.modes.diode_short import DiodeShort
from fieldtool.core.diagnosis.modes.diode_weak import DiodeWeak
from fieldtool.core.diagnosis.modes.drive_low import DriveLow
from fieldtool.core.diagnosis.modes.drive_missing import DriveMissing
from fieldtool.core.diagnosis.modes.drive_stuck_high import DriveStuckHigh
from fieldtool.core.diagnosis.modes.drive_stuck_low import DriveStuckLow
from fieldtool.core.diagnosis.modes.load_heavy import LoadHeavy
from fieldtool.core.diagnosis.modes.supply_low import SupplyLow

__all__ = ["BOARD_TARGETS", "MODES", "PART_KINDS", "FaultMode", "find_mode", "modes_for"]

MODES: tuple[FaultMode, ...] = (
    DiodeOpen(),
    DiodeShort(),
    DiodeLeaky(),
    DiodeWeak(),
    CapacitorOpen(),
    CapacitorShort(),
    CapacitorLowCap(),
    CapacitorEsr(),
    CapacitorLeaky(),
    DriveStuckLow(),
    DriveStuckHigh(),
    DriveMissing(),
    DriveLow(),
    SupplyLow(),
    LoadHeavy(),
)


def find_mode(kind: str, name: str) -> FaultMode | None:
    """The catalogued mode of that name for that kind of target, or None."""
    return next((m for m in MODES if m.applies_to == kind and m.name == name), None)


def modes_for(profile: Profile, kind: str) -> tuple[FaultMode, ...]:
    """The modes one kind of target can have on this board."""
    return tuple(m for m in MODES if m.applies_to == kind and m.available(profile))
