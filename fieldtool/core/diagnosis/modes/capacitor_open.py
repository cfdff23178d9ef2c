"""A capacitor gone open.

A lead or plate lost: a picofarad or so of stray capacitance left.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    at_most,
    capacitor_index,
)

OPEN_FARADS = 1e-12  # what is left of an open capacitor: pad and lead stray (common practice)


class CapacitorOpen(FaultMode):
    """A capacitor gone open."""

    name = "open"
    applies_to = "capacitor"
    unit = None
    words = "open"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """A picofarad or so of the capacitance left."""
        j = capacitor_index(circuit, target)
        params.c_f[:, j] = at_most(params.c_f[:, j], OPEN_FARADS)
