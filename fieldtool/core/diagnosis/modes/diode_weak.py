"""A diode with a raised forward drop.

Forward drop raised, as extra series resistance; grid 0.5×, 5× and 50× one capacitor's
switching impedance 1/(f·C).
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    FaultMode,
    diode_index,
    switching_ohms,
)


class DiodeWeak(FaultMode):
    """A diode with a raised forward drop."""

    name = "weak"
    applies_to = "diode"
    unit = "ohms"
    words = "weak (high forward drop)"

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
        """``severity`` ohms more in series with the diode."""
        params.d_rs[:, diode_index(circuit, target)] += severity
