"""How far any node of a board could read: the plausible range of a reading on that board.

A value beyond it (``1e300``, or 12 900 typed for 12.9) is not a reading of this board but a
wrong range, unit or node, and it is refused or flagged as such rather than handed to the
diagnosis, where it would only overflow.
"""

from __future__ import annotations

from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.measurement import Measurement
from fieldtool.core.plausible import Range

MARGIN = 2.0  # twice the ideal bound: room for every fault and meter error (no source)


def node_volts_range(profile: Profile) -> Range:
    """The readings any node of this board could show, healthy or with any single fault.

    No node of a multiplier exceeds what the ideal one with lossless diodes makes at its
    output, plus the drive's swing on a pump node and the supply; twice that leaves room for
    every fault and meter error.
    """
    ideal = abs(topology_of(profile).ideal_output_volts(profile, 0.0))
    bound = ideal + abs(profile.drive_volts) + abs(profile.drive_low_volts)
    bound += abs(profile.supply_volts)
    limit = max(MARGIN * bound, 1.0)
    return Range(
        -limit,
        limit,
        "V",
        "beyond what any node of this board can show: check the meter's range and unit, and "
        "that the probe is on this board",
    )


def reading_problem(profile: Profile, m: Measurement) -> str | None:
    """Why a reading cannot have come from this board, or None when it can (an overload can).

    A peak-to-peak ripple spans both ways, so half of it must lie within the range. Only
    voltages at nodes are judged here; a kind of reading in another unit or taken elsewhere
    brings its own range with it.
    """
    if m.value is None or m.quantity.unit != "V" or m.quantity.taken_at != "node":
        return None
    plausible = node_volts_range(profile)
    value = m.value / 2 if m.quantity.name == "ripple-pp" else m.value
    if plausible.contains(value):
        return None
    return (
        f"{m.at} {m.quantity.words} {m.value:g} {m.unit} is {plausible.why} (this board's "
        f"nodes stay within {plausible.text()})"
    )
