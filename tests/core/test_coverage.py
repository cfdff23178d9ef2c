"""`coverage`: which measurement kinds tell each catalogued fault from a healthy board.

Checks against published behaviour of the parts: a reservoir capacitor's ripple is I/(f·C)
(textbook, e.g. Horowitz & Hill, *The Art of Electronics*, 3rd ed., §1.7; from memory), so a
tenth of it left multiplies the ripple on its own node about tenfold while the DC stays in
band; an open diode in the chain starves every later node (DC finds it); a forward diode test
of a shorted diode reads near zero (the meter's current through the short).
"""

import functools

import pytest

from fieldtool.core.diagnosis.coverage import SIGMAS, coverage
from fieldtool.core.diagnosis.dictionary import build
from tests.conftest import make_profile

PROFILE = make_profile(load={"ohms": 10000.0}, test_loads={"ohms": [10000.0]})


@functools.cache
def _coverage():
    return coverage(build(PROFILE))


def _at(key, severity=None):
    rows = _coverage().of(key)
    if severity is None:
        return rows[0]
    return min(rows, key=lambda r: abs(r.severity - severity))


def test_a_reservoir_at_a_tenth_is_found_by_ripple_at_its_own_node_not_by_dc():
    c4 = _at("C4:lowcap", 0.1)  # C4: stage 2's reservoir, on S2
    assert "ripple-pp" in c4.kinds() and c4.where["ripple-pp"] == "S2"
    assert "dc" not in c4.kinds()
    assert c4.separation["ripple-pp"] > SIGMAS
    # ripple ∝ 1/C: the less is left, the further from healthy, grid point by grid point
    seps = [
        r.separation["ripple-pp"]
        for r in sorted(_coverage().of("C4:lowcap"), key=lambda r: -r.severity)
    ]
    assert seps == sorted(seps)
    # a leak of ten times the load draws a tenth of the load current: inside every band
    assert not _at("D2:leaky", 1e6).findable


def test_hard_faults_are_found_by_dc_and_a_shorted_diode_by_its_diode_test():
    assert "dc" in _at("D3:open").kinds()
    short = _at("D3:short", 0.01)
    assert "diode-test" in short.kinds() and short.where["diode-test"] == "D3"


def test_the_listing_names_every_kind_and_what_nothing_finds():
    c = _coverage()
    assert c.kinds == ("dc", "ripple-pp", "ac-rms", "current", "dc-loaded", "diode-test")
    keys = {f.key for f in c.faults}
    assert "healthy" not in keys
    for key in c.unfindable():
        assert not any(r.findable for r in c.of(key))
        assert not c.findable(key)
    out = c.to_json()
    assert out["not_findable"] == list(c.unfindable())
    assert {f["fault"] for f in out["faults"]} == keys
    assert c.findable("C4:lowcap") and c.findable("C4:lowcap", 0.1)
    assert not c.findable("D2:leaky", 1e6) and c.findable("D2:leaky")
    assert not c.findable("no-such:fault")


@pytest.mark.parametrize("sigmas", [1.0, 3.0, 10.0])
def test_more_demanding_thresholds_find_fewer(sigmas):
    c = _coverage()
    loose = sum(len(f.kinds(sigmas)) for f in c.faults)
    strict = sum(len(f.kinds(sigmas * 2)) for f in c.faults)
    assert strict <= loose


def test_a_fault_is_found_by_the_designator_the_board_shows_or_the_default_one():
    board = make_profile(
        load={"ohms": 10000.0}, test_loads={"ohms": [10000.0]}, designators={"C4": "C104"}
    )
    c = coverage(build(board))
    assert c.of("C104:lowcap") == c.of("C4:lowcap") and c.of("C4:lowcap")
    assert c.findable("C4:lowcap", 0.1) and c.findable("C104:lowcap", 0.1)
