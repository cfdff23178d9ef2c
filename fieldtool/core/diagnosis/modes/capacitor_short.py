"""A shorted capacitor.

The dielectric broken down: about an ohm across the capacitor.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    capacitor_index,
)

SHORT_OHMS = 1.0  # a failed-short part reads about an ohm (common practice, no source)


class CapacitorShort(FaultMode):
    """A shorted capacitor."""

    name = "short"
    applies_to = "capacitor"
    unit = None
    words = "shorted"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """About an ohm across the capacitor."""
        params.c_gl[:, capacitor_index(circuit, target)] = 1.0 / SHORT_OHMS
