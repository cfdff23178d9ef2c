"""The AC input gone (an AC-fed ladder's transformer winding or feed open)."""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.diagnosis.modes.base import FaultMode, drive_sources


class DriveMissing(FaultMode):
    """No AC input at all."""

    name = "missing"
    applies_to = "drive"
    unit = None
    words = "AC input missing"

    def unavailable(self, profile: Profile) -> str | None:
        """AC-driven boards only."""
        if topology_of(profile).ac_drive:
            return None
        return "the drive here is a square clock: try stuck-low or stuck-high"

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """Each drive source held at 0 V."""
        for i in drive_sources(circuit):
            params.s_high[:, i] = 0.0
            params.s_low[:, i] = 0.0
