"""A capacitor that lost capacitance.

Capacitance down to a fraction of its value (electrolytic wear-out; ceramic cracks).
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    capacitor_index,
)


class CapacitorLowCap(FaultMode):
    """A capacitor that lost capacitance."""

    name = "lowcap"
    applies_to = "capacitor"
    unit = "fraction"
    words = "lost capacitance"

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """70 % down to 5 % left, so values between points stay in one honest group."""
        return (0.7, 0.5, 0.35, 0.2, 0.1, 0.05)

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """The capacitance times ``severity``, the fraction left."""
        params.c_f[:, capacitor_index(circuit, target)] *= severity
