"""What a reading of each kind may be on a board before the tool believes it.

The bound for voltages at nodes comes from first principles: no node of a multiplier exceeds
the ideal multiplier's output with lossless diodes (the topology's own closed form) plus the
drive's swing and the supply, and the tool allows twice that. Currents and diode tests have
their own bounds (common practice, no source; see ``reading_range``).
"""

import pytest

from fieldtool.core.circuit.reading_range import node_volts_range, reading_problem
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    RIPPLE_PP,
    TYPED,
    Measurement,
)
from tests.conftest import make_profile

BOARD = make_profile()


def test_the_node_bound_is_twice_the_ideal_multiplier_plus_drive_and_supply():
    ideal = abs(topology_of(BOARD).ideal_output_volts(BOARD, 0.0))
    bound = 2 * (ideal + BOARD.drive_volts + BOARD.drive_low_volts + BOARD.supply_volts)
    assert node_volts_range(BOARD).high == pytest.approx(bound)
    assert node_volts_range(BOARD).low == pytest.approx(-bound)


def _m(q, at, value):
    conditions = (("test_load_ohms", 10e3),) if q is DC_LOADED else ()
    return Measurement(at, q, value, TYPED, settled=True, conditions=conditions)


@pytest.mark.parametrize(
    "q, at, value, refused",
    [
        (DC, "S3", 16.0, False),
        (DC, "S3", -16.0, False),  # a floating node can sit below ground
        (DC, "S3", 1e300, True),
        (DC, "S3", 16e3, True),  # 16 V typed as kV
        (DC, "S3", None, False),  # an overload is no value to judge
        (RIPPLE_PP, "S3", 0.05, False),
        (RIPPLE_PP, "S3", 500.0, True),
        (AC_RMS, "P1", 2.5, False),
        (DC_LOADED, "S3", 14.0, False),
        (DC_LOADED, "S3", -1e9, True),
        (CURRENT, "supply", 0.002, False),
        (CURRENT, "supply", 50.0, True),  # amps typed for milliamps
        (DIODE_TEST, "D3", 0.61, False),
        (DIODE_TEST, "D3", 6.1, True),  # beyond the 3 V open-circuit voltage: it would be OL
    ],
)
def test_each_kind_has_its_plausible_range(q, at, value, refused):
    problem = reading_problem(BOARD, _m(q, at, value))
    assert (problem is not None) == refused, problem
    if refused:
        assert at in problem and "\n" not in problem


def test_a_rail_reading_names_its_rail_once():
    """'supply current', never 'supply supply current' (the rail is where it was taken)."""
    problem = reading_problem(BOARD, _m(CURRENT, "supply", 50.0))
    assert problem.startswith("supply current 50 A is beyond") and "supply supply" not in problem
