"""A diode gone open.

No conduction either way: the diode's series resistance becomes 1 TΩ and its leakage at most
GMIN.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    at_most,
    diode_index,
)

OPEN_OHMS = 1e12  # in series with the junction, so no bias makes it conduct (common practice)


class DiodeOpen(FaultMode):
    """A diode gone open."""

    name = "open"
    applies_to = "diode"
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
        """Open the diode: 1 TΩ in series with the junction, leakage at most GMIN."""
        j = diode_index(circuit, target)
        params.d_rs[:, j] = OPEN_OHMS
        params.d_gp[:, j] = at_most(params.d_gp[:, j], 1e-12)
