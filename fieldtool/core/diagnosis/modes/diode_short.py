"""A shorted diode.

The junction broken down: a low resistance across the diode, both ways. How low varies
from part to part and failure to failure (tens of milliohms for a welded junction or a metallised
short, ohms for a burnt one), and what the board reads depends on it wherever the short is
comparable with the source resistances around it: so the dictionary tries a range of
resistances, marginalised like any other severity. A spec without a value (``D5:short``)
means a typical short of ``SHORT_OHMS``.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import (
    SHORT_GRID_OHMS,
    SHORT_OHMS,
    FaultMode,
    diode_index,
    short_problem,
)


class DiodeShort(FaultMode):
    """A shorted diode."""

    name = "short"
    applies_to = "diode"
    unit = "ohms"
    words = "shorted"
    default_severity = SHORT_OHMS

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """10 Ω down to 10 mΩ, five points (mild to gross; ``SHORT_GRID_OHMS``)."""
        return SHORT_GRID_OHMS

    def severity_problem(self, value: float) -> str | None:
        """A short is 0 to 100 Ω; above that it is a leak."""
        return short_problem(self, value)

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """``severity`` ohms (default ``SHORT_OHMS``) across the diode."""
        ohms = SHORT_OHMS if severity is None else severity
        params.d_gp[:, diode_index(circuit, target)] = 1.0 / ohms
