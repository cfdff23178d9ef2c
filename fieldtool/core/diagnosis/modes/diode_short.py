"""A shorted diode: the junction broken down (``base.ShortMode`` says how it is modelled)."""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import SHORT_OHMS, ShortMode, diode_index

__all__ = ["SHORT_OHMS", "DiodeShort"]


class DiodeShort(ShortMode):
    """A shorted diode."""

    applies_to = "diode"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """``severity`` ohms (default ``SHORT_OHMS``) across the diode."""
        params.d_gp[:, diode_index(circuit, target)] = self.siemens(severity)
