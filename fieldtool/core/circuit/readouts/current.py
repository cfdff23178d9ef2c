"""Currents a meter in series reads: the supply lead, and a square driver's own supply rail.

- The **supply lead** (the DC input): the meter's burden sits in series with the supply's
  source resistance, so it is solved in place exactly; the reading is the lead's average.
- A **driver's rail** (square drive, or both Dickson clocks): a push-pull driver takes current
  from its rail only while its high side conducts, i.e. while its output is high; during an
  edge, in proportion to how far the output has risen. So the rail current is the average of
  the drive current times the waveform's level between 0 (low) and 1 (high). With the rail's
  bypass capacitor after the meter (as on any board), the burden lowers the rail, and so the
  drive's high level, by the average rail current times the burden: one fixed-point step from
  the unmetered board (the burden's drop is millivolts, so a second step changes nothing the
  meter shows). By charge balance an ideal N-stage pump takes N·I_out from its drive rail and
  I_out through its supply lead, (N+1)·I_out in all (Tanzawa & Tanaka, IEEE JSSC 32(8), 1997;
  from memory). An AC-fed ladder's drive is a transformer winding, not a rail: no reading.
"""

from __future__ import annotations

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.solver import Period, waveform_shape


def supply_index(circuit: Circuit) -> int | None:
    """The DC supply source's index, or None where the board has no DC input."""
    return next((i for i, s in enumerate(circuit.sources) if s.kind == "dc"), None)


def rail_sources(circuit: Circuit) -> list[int]:
    """The square drive sources a driver rail feeds (empty for a sine drive)."""
    return [i for i, s in enumerate(circuit.sources) if s.kind.startswith("square")]


def source_amps(per: Period, rows: Params, which: np.ndarray, node: int, source: int) -> np.ndarray:
    """Period-average current out of one source into its node, for the rows ``which``."""
    h = np.diff(per.times)
    g = rows.s_g[which, source]
    i_t = g[:, None] * (per.src[which, :, source] - per.v[which, :, node - 1])
    return (i_t * h).sum(axis=1) / per.times[-1]


def rail_amps(circuit: Circuit, per: Period, rows: Params, which: np.ndarray) -> np.ndarray:
    """The driver rail's average current for the rows ``which`` (see the module docstring)."""
    h = np.diff(per.times)
    total = np.zeros(len(which))
    for s in rail_sources(circuit):
        src = circuit.sources[s]
        level = waveform_shape(src.kind, per.times[1:], circuit)  # (T,) 0 low … 1 high
        i_t = rows.s_g[which, s][:, None] * (per.src[which, :, s] - per.v[which, :, src.node - 1])
        total += (i_t * level * h).sum(axis=1) / per.times[-1]
    return total


def with_rail_burden(
    circuit: Circuit, params: Params, amps: np.ndarray, burden_ohms: float
) -> Params:
    """The variants with each driver's high level lowered by its rail current × the burden."""
    rows = params.copy()
    for s in rail_sources(circuit):
        rows.s_high[:, s] -= amps * burden_ohms
    return rows
