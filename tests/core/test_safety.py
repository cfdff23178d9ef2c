"""Safety figures from readings against ½CV², RC discharge and the hazard threshold."""

import math
from pathlib import Path

import pytest

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.safety import (
    HAZARD_STANDARD,
    above_threshold,
    expected_volts,
    format_duration,
    node_hazard,
    safety_figures,
    threshold_source,
)
from tests.conftest import make_profile

R_LOAD, C_RES = 100e3, 100e-6


@pytest.fixture(scope="module")
def one_stage():
    """One dc-ladder stage whose big reservoir C2 dominates: it discharges as a single RC."""
    p = make_profile(
        board={"stages": 1, "safe_volts": 3.0},
        load={"ohms": R_LOAD},
        overrides={"C1": {"farads": 1e-9}, "C2": {"farads": C_RES}},
    )
    return p, expected_volts(expect(p))


def test_energy_is_half_c_v_squared_from_readings(one_stage):
    """Stored energy E = ½CV² (standard result, e.g. Horowitz & Hill, The Art of Electronics,
    3rd ed., ch. 1; from memory), with V the voltage across each capacitor from the readings."""
    p, e = one_stage
    fig = safety_figures(p, e, {"S0": 5.0, "P1": 6.0, "S1": 8.0})
    c2 = next(c for c in fig.capacitors if c.ref == "C2")
    assert c2.volts == pytest.approx(8.0)
    assert c2.joules == pytest.approx(0.5 * C_RES * 8.0**2)
    c1 = next(c for c in fig.capacitors if c.ref == "C1")
    # C1 runs from P1 to the drive node, whose average is half the 5 V square swing.
    assert c1.volts == pytest.approx(6.0 - 2.5)
    assert fig.stored_energy_j == pytest.approx(0.5 * C_RES * 64 + 0.5 * 1e-9 * 3.5**2)
    assert fig.all_from_readings
    assert fig.highest_node == "S1" and fig.highest_volts == pytest.approx(8.0)
    assert fig.highest_measured


def test_unread_nodes_fall_back_to_expected_and_say_so(one_stage):
    p, e = one_stage
    fig = safety_figures(p, e, {"S0": 1.0})
    assert set(fig.estimated) == {"C1", "C2"}
    c2 = next(c for c in fig.capacitors if c.ref == "C2")
    assert c2.volts == pytest.approx(e["S1"])
    assert fig.highest_node == "P1" and not fig.highest_measured


def test_discharge_from_read_charge_matches_rc(one_stage):
    """RC discharge V(t) = V0·e^(−t/RC), so t = RC·ln(V0/Vsafe) (any circuit text, e.g.
    Horowitz & Hill, ch. 1; from memory). The reservoir holds what the readings say."""
    p, e = one_stage
    v0 = 7.0
    fig = safety_figures(p, e, {"S0": 0.0, "P1": 2.6, "S1": v0})
    rc = R_LOAD * C_RES / (1 + R_LOAD / 1e10)  # the capacitor's own 10 GΩ leakage in parallel
    # Backward Euler with steps growing 10 % a step overstates the time by a few percent.
    assert fig.discharge_s == pytest.approx(rc * math.log(v0 / 3.0), rel=0.05)
    # A higher reading takes longer, by the same law.
    fig2 = safety_figures(p, e, {"S0": 0.0, "P1": 2.6, "S1": 2 * v0})
    assert fig2.discharge_s == pytest.approx(rc * math.log(2 * v0 / 3.0), rel=0.05)
    assert fig2.discharge_s > fig.discharge_s


def test_below_safe_level_needs_no_time(one_stage):
    p, e = one_stage
    fig = safety_figures(p, e, {"S0": 0.0, "P1": 0.5, "S1": 1.0})
    assert fig.discharge_s == 0.0
    assert fig.hazard_nodes == ()


@pytest.mark.parametrize(
    ("volts", "safe", "hazard"),
    [(49.9, 50.0, False), (50.0, 50.0, True), (-120.0, 50.0, True), (None, 50.0, True)],
)
def test_threshold(volts, safe, hazard):
    """At or above the safe level in magnitude is a hazard; an overload is always one."""
    assert above_threshold(volts, safe) is hazard


def test_hazard_nodes_and_standard_named():
    """The default 50 V safe level is the NFPA 70E threshold (from memory: check the edition)."""
    p = make_profile(board={"stages": 8}, supply={"volts": 12.0}, drive={"volts": 12.0})
    e = expected_volts(expect(p))
    assert p.safe_volts == 50.0
    assert HAZARD_STANDARD in threshold_source(p) and "edition" in threshold_source(p)
    readings = {"S1": 30.0, "S8": None}
    fig = safety_figures(p, e, readings)
    assert "S8" in fig.overloaded and "S8" in fig.hazard_nodes
    assert "S1" not in fig.hazard_nodes
    # An unread node is judged on its expected value.
    assert node_hazard("S7", e, readings, 50.0) == (abs(e["S7"]) >= 50.0)
    assert node_hazard("S0", e, readings, 50.0) is False
    assert node_hazard("S1", e, readings, 50.0) is False  # read at 30 V, whatever expected


def test_custom_safe_level_is_attributed_to_the_profile(one_stage):
    p, _ = one_stage
    assert threshold_source(p).startswith("3 V set by the board profile")


@pytest.mark.parametrize(
    ("seconds", "text"),
    [
        (0.0, "0 s"),
        (4.24, "4.2 s"),
        (42.0, "42 s"),
        (190.0, "3 min 10 s"),
        (math.inf, "more than a day"),
    ],
)
def test_format_duration(seconds, text):
    assert format_duration(seconds) == text


def test_signal_words_come_from_one_place():
    """WARNING (could kill) and CAUTION (minor or moderate injury) as ANSI Z535.4 defines them
    (from memory; see core/hazard.py) are chosen in one module; no screen or command types
    its own, so the same hazard never reads WARNING in one place and CAUTION in another."""
    import re

    from fieldtool.core import hazard

    package = Path(hazard.__file__).resolve().parents[1]
    typed = [
        f"{path.relative_to(package)}:{n}"
        for path in package.rglob("*.py")
        if path.name != "hazard.py"
        for n, line in enumerate(path.read_text().splitlines(), start=1)
        if re.search(r"\b(DANGER|WARNING|CAUTION)\s*:", line) and not line.lstrip().startswith("#")
    ]
    assert typed == []
    assert hazard.signal_word(None, 50.0) == "WARNING"  # unknown: assume it could kill
    assert hazard.signal_word(120.0, 50.0) == "WARNING"
    assert hazard.signal_word(-57.0, 50.0) == "WARNING"  # a negative ladder as much as a positive
    assert hazard.signal_word(15.0, 50.0) == "CAUTION"
