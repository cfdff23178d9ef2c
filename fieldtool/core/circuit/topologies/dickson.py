"""Two-phase Dickson charge pump (Dickson, IEEE J. Solid-State Circuits SC-11(3), 1976).

A chain of N + 1 diodes D1 … D(N+1) from the DC input S0 through pump nodes P1 … PN to OUT;
pump capacitor Ck from Pk to clock φ1 (odd k) or φ2 (even k); output capacitor C(N+1) to
ground. Ideal output Vin − Vd + N·(Vφ − Vd); a profile's stray capacitance per pump node is
modelled as a capacitor to ground on each pump node.
"""

from __future__ import annotations

import numpy as np

from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies.base import (
    GROUND,
    ChainCell,
    Layout,
    StartCharge,
    Topology,
)


class Dickson(Topology):
    """The two-phase Dickson charge pump."""

    name = "dickson"
    words = "two-phase Dickson charge pump"
    dc_input = True
    ac_drive = False
    waveforms = ("square",)
    polarities = ("positive",)
    legend = "↑ pump caps to clock φ1 (odd) / φ2 (even) · ↓ to ground"

    def diodes(self, stages: int) -> list[str]:
        """D1 … D(N+1)."""
        return [f"D{i}" for i in range(1, stages + 2)]

    def capacitors(self, stages: int) -> list[str]:
        """C1 … CN pump capacitors, C(N+1) output."""
        return [f"C{i}" for i in range(1, stages + 2)]

    def nodes(self, stages: int) -> list[str]:
        """S0, P1 … PN, OUT."""
        return ["S0"] + [f"P{k}" for k in range(1, stages + 1)] + ["OUT"]

    def layout(self, profile: Profile) -> Layout:
        """Supply on S0, two clocks in antiphase, the diode chain to OUT."""
        n = profile.stages
        chain = self.nodes(n)
        diodes = tuple((f"D{i}", chain[i - 1], chain[i]) for i in range(1, n + 2))
        caps = [(f"C{k}", f"P{k}", "CLK1" if k % 2 else "CLK2") for k in range(1, n + 1)]
        caps.append((f"C{n + 1}", "OUT", GROUND))
        sources = (
            ("supply", "S0", "dc"),
            ("clock", "CLK1", "square"),
            ("clock-inverted", "CLK2", "square-inverted"),
        )
        strays = tuple(chain[1:-1]) if profile.stray_farads > 0 else ()
        return Layout(diodes, tuple(caps), sources, "OUT", strays)

    def start_charge(self, capacitors: tuple[str, ...], start: StartCharge) -> np.ndarray:
        """Each pump node one swing less a drop above the one before."""
        vd, swing = start.diode_drop, start.high - start.low
        x = np.zeros((len(start.vin), len(capacitors)))
        n = sum(1 for c in capacitors if not c.startswith("Cs_")) - 1
        for k in range(1, n + 1):
            base = start.vin - vd + (k - 1) * (swing - vd)
            x[:, capacitors.index(f"C{k}")] = base - start.low
            if f"Cs_P{k}" in capacitors:
                x[:, capacitors.index(f"Cs_P{k}")] = base + (swing if k % 2 == 0 else 0.0)
        x[:, capacitors.index(f"C{n + 1}")] = start.vin - vd + n * (swing - vd)
        return x

    def ideal_output_volts(self, profile: Profile, diode_drop: float) -> float:
        """Vin − Vd + N·(Vφ − Vd)."""
        swing = profile.drive_volts - profile.drive_low_volts
        return profile.supply_volts - diode_drop + profile.stages * (swing - diode_drop)

    def chain(self, stages: int) -> list[ChainCell]:
        """S0, the pump nodes with their capacitors above, OUT with the output cap below."""
        out = [ChainCell("S0", None, None)]
        out += [ChainCell(f"P{k}", f"C{k}", None) for k in range(1, stages + 1)]
        return out + [ChainCell("OUT", None, f"C{stages + 1}")]
