"""A capacitor with high ESR.

Equivalent series resistance raised to the severity; grid 0.5×, 5× and 50× one capacitor's
switching impedance 1/(f·C).
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    capacitor_index,
    switching_ohms,
)


class CapacitorEsr(FaultMode):
    """A capacitor with high ESR."""

    name = "esr"
    applies_to = "capacitor"
    unit = "ohms"
    words = "high ESR"

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """0.5×, 5× and 50× the switching impedance 1/(f·C)."""
        return tuple(switching_ohms(profile) * k for k in (0.5, 5.0, 50.0))

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """The equivalent series resistance set to ``severity`` ohms."""
        params.c_esr[:, capacitor_index(circuit, target)] = severity
