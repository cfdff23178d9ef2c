"""The load drawing more than rated (a failing part downstream of the rail)."""

from __future__ import annotations

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.diagnosis.modes.base import FaultMode


class LoadHeavy(FaultMode):
    """The load heavier than rated."""

    name = "heavy"
    applies_to = "load"
    unit = "factor"
    words = "load heavier than rated"

    def unavailable(self, profile: Profile) -> str | None:
        """Boards with a load (a constant-current load of 0 A draws nothing to multiply)."""
        if profile.load_ohms is None and not profile.load_amps:
            return "this board's load is 0 A, so a heavier load would change nothing"
        return None

    def grid(self, profile: Profile) -> tuple[float, ...]:
        """1.5× to 20× the rated load current."""
        return (1.5, 2.0, 3.0, 5.0, 10.0, 20.0)

    def apply(
        self,
        circuit: Circuit,
        params: Params,
        target: str,
        severity: float | None,
        profile: Profile,
    ) -> None:
        """The rated load's current times ``severity`` (a resistor's conductance, or a sink)."""
        o = circuit.output_node - 1
        if profile.load_ohms is not None:
            params.g_shunt[:, o] += (severity - 1.0) / profile.load_ohms
        else:
            params.i_load[:, o] *= severity
