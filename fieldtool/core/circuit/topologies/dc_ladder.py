"""DC-fed stacked ladder: each stage an input diode, a flying capacitor on the drive, an output
diode and a reservoir to ground, stacked on the DC input.

Stage k: input diode D(2k−1) from S(k−1) to Pk, output diode D(2k) from Pk to Sk, flying
capacitor C(2k−1) from Pk to the drive, reservoir C(2k) from Sk to ground. Ideal output with
constant-drop diodes Vin + N·(Vφ − 2·Vd) (charge balance; see tests/core/test_formulas.py).
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


class DcLadder(Topology):
    """The DC-fed stacked ladder."""

    name = "dc-ladder"
    words = "DC-fed stacked ladder"
    dc_input = True
    ac_drive = False
    waveforms = ("square",)
    legend = "↑ flying caps to drive · ↓ reservoirs to ground"

    def diodes(self, stages: int) -> list[str]:
        """D1 … D(2N)."""
        return [f"D{i}" for i in range(1, 2 * stages + 1)]

    def capacitors(self, stages: int) -> list[str]:
        """C1 … C(2N)."""
        return [f"C{i}" for i in range(1, 2 * stages + 1)]

    def nodes(self, stages: int) -> list[str]:
        """S0, then Pk and Sk for each stage."""
        out = ["S0"]
        for k in range(1, stages + 1):
            out += [f"P{k}", f"S{k}"]
        return out

    def layout(self, profile: Profile) -> Layout:
        """Supply on S0, the square drive on DRV, the stages stacked."""
        diodes, caps = [], []
        for k in range(1, profile.stages + 1):
            diodes += [(f"D{2 * k - 1}", f"S{k - 1}", f"P{k}"), (f"D{2 * k}", f"P{k}", f"S{k}")]
            caps += [(f"C{2 * k - 1}", f"P{k}", "DRV"), (f"C{2 * k}", f"S{k}", GROUND)]
        sources = (("supply", "S0", "dc"), ("drive", "DRV", "square"))
        return Layout(tuple(diodes), tuple(caps), sources, f"S{profile.stages}")

    def start_charge(self, capacitors: tuple[str, ...], start: StartCharge) -> np.ndarray:
        """Each stage adds the swing less two drops; the flying cap holds its pump node's
        level less the drive's low level."""
        pol, vd = start.polarity, start.diode_drop
        swing = start.high - start.low
        x = np.zeros((len(start.vin), len(capacitors)))
        for k in range(1, len(capacitors) // 2 + 1):
            s_prev = start.vin + pol * (k - 1) * (swing - 2 * vd)
            p_k = s_prev - vd if pol > 0 else s_prev + vd - swing
            x[:, capacitors.index(f"C{2 * k - 1}")] = p_k - start.low
            x[:, capacitors.index(f"C{2 * k}")] = start.vin + pol * k * (swing - 2 * vd)
        return x

    def ideal_output_volts(self, profile: Profile, diode_drop: float) -> float:
        """Vin + N·(Vφ − 2·Vd), at least 0.1 V a stage."""
        swing = profile.drive_volts - profile.drive_low_volts
        return profile.supply_volts + profile.stages * max(swing - 2 * diode_drop, 0.1)

    def chain(self, stages: int) -> list[ChainCell]:
        """S0, then P1, S1, P2, … with flying caps above and reservoirs below."""
        out = [ChainCell("S0", None, None)]
        for k in range(1, stages + 1):
            out += [
                ChainCell(f"P{k}", f"C{2 * k - 1}", None),
                ChainCell(f"S{k}", None, f"C{2 * k}"),
            ]
        return out
