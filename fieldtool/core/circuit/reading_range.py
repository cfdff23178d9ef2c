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
SUPPLY_AMPS = 10.0  # a multiplier's supply current: a few amperes at most (as [load] amps)


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


def reading_range(profile: Profile, m: Measurement) -> Range | None:
    """The values a reading of this kind could take on this board (None: not judged here).

    Voltages at nodes within ``node_volts_range`` (a peak-to-peak ripple spans both ways, so it
    may reach twice it); a current in the supply lead within what a multiplier draws; a diode
    test from 0 V to the meter's open-circuit voltage, above which it shows OL.
    """
    q = m.quantity
    if q.unit == "V" and q.taken_at == "node":
        nodes = node_volts_range(profile)
        if q.name == "ripple-pp":
            return Range(0.0, 2 * nodes.high, "V", nodes.why)
        return nodes
    if q.unit == "A" and q.taken_at == "rail":
        return Range(
            -SUPPLY_AMPS,
            SUPPLY_AMPS,
            "A",
            "beyond what a diode–capacitor multiplier draws (common practice, no source): "
            "check the meter's current range and unit",
        )
    if q.unit == "V" and q.taken_at == "part":
        open_circuit = profile.instruments.diode_test_volts
        return Range(
            -0.1 * open_circuit,
            1.1 * open_circuit,
            "V",
            f"beyond the diode test's {open_circuit:g} V open-circuit voltage, where the meter "
            "shows OL: check the meter is on diode test",
        )
    return None


def reading_problem(profile: Profile, m: Measurement) -> str | None:
    """Why a reading cannot have come from this board, or None when it can (an overload can,
    and so can a kind of reading this module does not judge)."""
    plausible = None if m.value is None else reading_range(profile, m)
    if plausible is None or plausible.contains(m.value):
        return None
    return (
        f"{m.at} {m.quantity.words} {m.value:g} {m.unit} is {plausible.why} (this board's "
        f"{'nodes stay' if m.quantity.taken_at == 'node' else 'readings stay'} within "
        f"{plausible.text()})"
    )
