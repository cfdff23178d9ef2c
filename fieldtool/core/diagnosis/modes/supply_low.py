"""The DC input down to a fraction (a sagging rail, a dropping series part upstream)."""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.diagnosis.modes.base import FaultMode, supply_sources


class SupplyLow(FaultMode):
    """The DC supply low."""

    name = "low"
    applies_to = "supply"
    unit = "fraction"
    words = "supply low"

    def unavailable(self, profile: Profile) -> str | None:
        """Boards with a DC input above 0 V only (a fraction of 0 V is still 0 V)."""
        if not topology_of(profile).dc_input:
            return "this board has no DC input"
        if profile.supply_volts == 0:
            return "this board's DC input is 0 V, so a low supply would change nothing"
        return None

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """90 % down to 30 % of the supply left."""
        return (0.9, 0.75, 0.6, 0.45, 0.3)

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """Every DC source times ``severity``."""
        for i in supply_sources(circuit):
            params.s_high[:, i] *= severity
            params.s_low[:, i] *= severity
