"""The square drive held high (both clocks of a Dickson pump).

Only a square-driven board can have it; an AC-fed ladder's drive goes missing instead.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.diagnosis.modes.base import FaultMode, drive_sources


class DriveStuckHigh(FaultMode):
    """The square drive held at its high level."""

    name = "stuck-high"
    applies_to = "drive"
    unit = None
    words = "drive stuck high"

    def unavailable(self, profile: Profile) -> str | None:
        """Square-driven boards only."""
        if not topology_of(profile).ac_drive:
            return None
        return "the drive here is an AC input: try missing or low"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """Each drive source's low level set to its high level."""
        for i in drive_sources(circuit):
            params.s_low[:, i] = params.s_high[:, i]
