"""A shorted capacitor: the dielectric broken down (``base.ShortMode`` says how it is modelled)."""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import SHORT_OHMS, ShortMode, capacitor_index

__all__ = ["SHORT_OHMS", "CapacitorShort"]


class CapacitorShort(ShortMode):
    """A shorted capacitor."""

    applies_to = "capacitor"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """``severity`` ohms (default ``SHORT_OHMS``) across the capacitor."""
        params.c_gl[:, capacitor_index(circuit, target)] = self.siemens(severity)
