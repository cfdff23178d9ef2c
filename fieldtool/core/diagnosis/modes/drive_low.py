"""The drive's swing down to a fraction (a weak driver, a sagging driver rail).

A square drive keeps its low level and loses height; an AC drive's peak shrinks both ways.
"""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.diagnosis.modes.base import FaultMode, drive_sources


class DriveLow(FaultMode):
    """The drive swing low."""

    name = "low"
    applies_to = "drive"
    unit = "fraction"
    words = "drive swing low"

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """90 % down to 30 % of the swing left."""
        return (0.9, 0.75, 0.6, 0.45, 0.3)

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """The swing times ``severity``: both levels of an AC drive, the high one of a square."""
        ac = topology_of(profile).ac_drive
        for i in drive_sources(circuit):
            hi, lo = params.s_high[:, i].copy(), params.s_low[:, i].copy()
            if ac or circuit.sources[i].kind == "sine":
                params.s_high[:, i] = hi * severity
                params.s_low[:, i] = lo * severity
            else:
                params.s_high[:, i] = lo + (hi - lo) * severity
