"""A diode leaking in reverse.

Reverse leakage, as a resistance across the diode; grid scaled to the load resistance (a leak
draws current as the load does): 10×, 1× and 0.1× it.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    LEAKY_OHMS,
    FaultMode,
    diode_index,
    load_ohms_equivalent,
)


class DiodeLeaky(FaultMode):
    """A diode leaking in reverse."""

    name = "leaky"
    applies_to = "diode"
    unit = "ohms"
    words = "leaky (reverse leakage)"

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
        """A resistance of ``severity`` ohms across the diode."""
        params.d_gp[:, diode_index(circuit, target)] += 1.0 / severity
