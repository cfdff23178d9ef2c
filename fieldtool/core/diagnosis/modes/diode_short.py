"""A shorted diode.

The junction broken down: about an ohm across the diode, both ways.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    diode_index,
)

SHORT_OHMS = 1.0  # a failed-short part reads about an ohm (common practice, no source)


class DiodeShort(FaultMode):
    """A shorted diode."""

    name = "short"
    applies_to = "diode"
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
        """About an ohm across the diode."""
        params.d_gp[:, diode_index(circuit, target)] = 1.0 / SHORT_OHMS
