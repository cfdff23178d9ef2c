"""AC-fed half-wave series multiplier (Cockcroft–Walton ladder).

Stage k: D(2k−1) from S(k−1) (ground for k = 1) to Pk, D(2k) from Pk to Sk; C(2k−1) from Pk to
P(k−1) (the AC input for k = 1), C(2k) from Sk to S(k−1) (ground for k = 1). Ideal no-load
output 2·N·(Vpeak − Vd) (Kuffel, Zaengl & Kuffel, *High Voltage Engineering Fundamentals*,
2nd ed., 2000, §2.2.2; from memory).
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


class AcLadder(Topology):
    """The AC-fed Cockcroft–Walton ladder."""

    name = "ac-ladder"
    words = "AC-fed Cockcroft–Walton ladder"
    dc_input = False
    ac_drive = True
    waveforms = ("sine", "square")
    legend = "↑ to previous pump node (C1 to AC in) · ↓ to previous stage (first to ground)"

    def diodes(self, stages: int) -> list[str]:
        """D1 … D(2N)."""
        return [f"D{i}" for i in range(1, 2 * stages + 1)]

    def capacitors(self, stages: int) -> list[str]:
        """C1 … C(2N)."""
        return [f"C{i}" for i in range(1, 2 * stages + 1)]

    def nodes(self, stages: int) -> list[str]:
        """Pk and Sk for each stage (no DC input node)."""
        out = []
        for k in range(1, stages + 1):
            out += [f"P{k}", f"S{k}"]
        return out

    def layout(self, profile: Profile) -> Layout:
        """The AC source on node AC; each stage hangs from the one before."""
        diodes, caps = [], []
        for k in range(1, profile.stages + 1):
            prev_p = "AC" if k == 1 else f"P{k - 1}"
            prev_s = GROUND if k == 1 else f"S{k - 1}"
            diodes += [(f"D{2 * k - 1}", prev_s, f"P{k}"), (f"D{2 * k}", f"P{k}", f"S{k}")]
            caps += [(f"C{2 * k - 1}", f"P{k}", prev_p), (f"C{2 * k}", f"S{k}", prev_s)]
        kind = "sine" if profile.waveform == "sine" else "square"
        return Layout(tuple(diodes), tuple(caps), (("drive", "AC", kind),), f"S{profile.stages}")

    def start_charge(self, capacitors: tuple[str, ...], start: StartCharge) -> np.ndarray:
        """C1 holds one peak less a drop, every other capacitor two."""
        vm = np.maximum(start.high - start.diode_drop, 0.0)
        x = np.zeros((len(start.vin), len(capacitors)))
        for k in range(1, len(capacitors) // 2 + 1):
            x[:, capacitors.index(f"C{2 * k - 1}")] = start.polarity * (vm if k == 1 else 2 * vm)
            x[:, capacitors.index(f"C{2 * k}")] = start.polarity * 2 * vm
        return x

    def ideal_output_volts(self, profile: Profile, diode_drop: float) -> float:
        """2·N·(Vpeak − Vd), at least 0.1 V a stage."""
        return 2 * profile.stages * max(profile.drive_volts - diode_drop, 0.1)

    def chain(self, stages: int) -> list[ChainCell]:
        """Ground, then P1, S1, P2, …"""
        out = [ChainCell(GROUND, None, None)]
        for k in range(1, stages + 1):
            out += [
                ChainCell(f"P{k}", f"C{2 * k - 1}", None),
                ChainCell(f"S{k}", None, f"C{2 * k}"),
            ]
        return out
