"""A leaky capacitor.

Leakage, as a resistance across the capacitor; grid 10×, 1× and 0.1× the load resistance.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    LEAKY_OHMS,
    FaultMode,
    capacitor_index,
    load_ohms_equivalent,
)


class CapacitorLeaky(FaultMode):
    """A leaky capacitor."""

    name = "leaky"
    applies_to = "capacitor"
    unit = "ohms"
    words = "leaky"

    severity_range = LEAKY_OHMS

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """10×, 1× and 0.1× the load resistance."""
        return tuple(load_ohms_equivalent(profile) * k for k in (10.0, 1.0, 0.1))

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """A resistance of ``severity`` ohms across the capacitor."""
        params.c_gl[:, capacitor_index(circuit, target)] += 1.0 / severity
