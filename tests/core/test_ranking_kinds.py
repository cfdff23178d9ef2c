"""Ranking over every measurement kind: the next measurement, its effort and caution, readings
that fit nothing, and the shared gain error of a reading under a test load.

Readings here are the dictionary's own predictions for one of its rows (the ranking's logic
alone); the same loop against readings from ngspice is in ``test_worn_ngspice.py``. Bayes'
rule and expected information gain: Cover & Thomas, *Elements of Information Theory*, 2nd ed.,
2006, §2.5–2.6; de Kleer & Williams, Artificial Intelligence 32(1), 1987 (from memory).
"""

import functools
import math

import numpy as np
import pytest

from fieldtool.core.circuit.spec import Efforts
from fieldtool.core.diagnosis.dictionary import build
from fieldtool.core.diagnosis.ranking import Suggestion, diagnose
from fieldtool.core.measurement import DC, DC_LOADED, QUANTITIES, Measurement, Source
from tests.conftest import make_profile
from tests.readings import dc

PROFILE = make_profile(load={"ohms": 10000.0}, test_loads={"ohms": [10000.0]})
ENGINE = Source("simulated")


@functools.cache
def _dictionary():
    return build(PROFILE)


@pytest.fixture
def d():
    return _dictionary()


def _reading(d, row: int, key) -> Measurement:
    at, quantity, conditions = key
    ch = d.channel(at, quantity, conditions)
    value = None if ch.over[row] else float(ch.mean[row])
    return Measurement(at, QUANTITIES[quantity], value, ENGINE, settled=True, conditions=conditions)


def _take(d, row, result, readings):
    s = result.next_measurement
    readings.append(_reading(d, row, (s.at, s.quantity, s.conditions)))


def test_every_kind_is_worth_something_before_any_reading(d):
    result = diagnose(d, [])
    kinds = {q for _, q in result.worth}
    assert kinds == {"dc", "ripple-pp", "ac-rms", "current", "dc-loaded", "diode-test"}
    assert all(v >= 0 for v in result.worth.values())
    s = result.next_measurement
    assert isinstance(s, Suggestion) and s.quantity in QUANTITIES and s.gain_bits > 0
    # its worth is the best there is (gain per effort)
    assert result.worth[s.at, s.quantity] == pytest.approx(max(result.worth.values()))
    assert s.effort == Efforts().of(s.quantity)


def test_a_worn_reservoir_that_dc_cannot_see_is_found_by_ripple(d):
    rows = d.rows_of("C4:lowcap")
    row = int(rows[np.argmin(np.abs(d.row_severity[rows] - 0.1))])  # a tenth of C4 left
    healthy = d.rows_of("healthy")[0]
    # every DC reading inside the healthy band
    bands = [d.band(n) for n in d.nodes]
    assert all(b.contains(float(d.mean[row, j])) for j, b in enumerate(bands))
    readings = [dc(n, float(d.mean[row, j])) for j, n in enumerate(d.nodes)]
    result = diagnose(d, readings)
    assert result.next_probe is None  # no DC node left
    s = result.next_measurement
    assert s is not None and s.quantity != "dc"
    while result.next_measurement is not None and len(readings) < 20:
        _take(d, row, result, readings)
        result = diagnose(d, readings)
    members = {m for a in result.ambiguity for m in a.members}
    assert result.top.key == "C4:lowcap" or "C4:lowcap" in members, result.top.key
    assert {r.quantity.name for r in readings} - {"dc"}
    assert result.top.key != "healthy" and d.ripple[row].max() > d.ripple[healthy].max()


def test_power_off_steps_carry_the_discharge_caution_and_get_cheap_once_off(d):
    keys = [k for k in d.channel_keys() if k[1] == "diode-test"]
    assert keys
    dear = Efforts(dc=1e6, ripple_pp=1e6, ac_rms=1e6, dc_loaded=1e6, current=1e6)
    on = diagnose(d, [], efforts=dear, powered=True).next_measurement
    assert on.quantity == "diode-test"
    assert on.effort == dear.power_off
    assert "discharge" in on.caution and f"{PROFILE.safe_volts:g} V" in on.caution
    off = diagnose(d, [], efforts=dear, powered=False).next_measurement
    assert off.quantity == "diode-test" and off.effort == dear.diode_test
    assert off.caution is None  # already off, discharged and verified
    # back to powered readings after power-off costs the re-power
    dc_off = diagnose(d, [], powered=False)
    some_dc = next(k for k in dc_off.worth if k[1] == "dc")
    assert dc_off.worth[some_dc] < diagnose(d, [], powered=True).worth[some_dc]


def test_a_test_load_step_shows_the_load_s_power_and_caution(d):
    dear = Efforts(dc=1e6, ripple_pp=1e6, ac_rms=1e6, current=1e6, power_off=1e6)
    s = diagnose(d, [], efforts=dear).next_measurement
    assert s.quantity == "dc-loaded" and s.conditions == (("test_load_ohms", 10000.0),)
    volts = float(d.unloaded[0, d.node_index(d.output_node)])
    watts = volts**2 / 10000.0  # P = V²/R (Ohm's law)
    assert f"{watts:.3g} W" in s.caution
    assert "rated" in s.caution


def test_a_gain_error_shared_by_the_loaded_and_unloaded_reading_cancels_in_the_drop(d):
    # The same meter on the same range reads both 3σ-of-its-gain high: alone the loaded reading
    # looks like a fault; beside the DC reading only the drop counts, which the gain error
    # moves by a fraction of itself (GUM, JCGM 100:2008 §5.2, correlated inputs).
    out = d.output_node
    j = d.node_index(out)
    h = d.rows_of("healthy")[0]
    gain = 1 + 3 * PROFILE.meter_percent / 100 / math.sqrt(3)
    cond = (("test_load_ohms", 10000.0),)
    unloaded = float(d.mean[h, j]) * gain
    loaded = float(d.loaded[h, 0, j]) * gain
    only_loaded = diagnose(d, [Measurement(out, DC_LOADED, loaded, ENGINE, conditions=cond)])
    both = diagnose(
        d,
        [
            Measurement(out, DC, unloaded, ENGINE),
            Measurement(out, DC_LOADED, loaded, ENGINE, conditions=cond),
        ],
    )
    p_healthy = {s.key: s.probability for s in both.suspects}["healthy"]
    p_alone = {s.key: s.probability for s in only_loaded.suspects}["healthy"]
    assert both.top.key == "healthy"
    assert p_healthy > p_alone
    assert not both.fit.no_fit


def test_one_node_on_the_wrong_range_keeps_suggesting_and_names_the_reading(d):
    # The example: a healthy board with one node read a decade low.
    h = d.rows_of("healthy")[0]
    values = {n: float(d.mean[h, j]) for j, n in enumerate(d.nodes)}
    values["S2"] /= 10.0
    result = diagnose(d, [dc(n, v) for n, v in values.items()])
    assert result.fit.no_fit and result.conditional
    assert result.fit.text.startswith("re-read S2")
    assert result.fit.worst_node == "S2"
    assert result.fit.all_but_one is not None and "healthy" in result.fit.all_but_one.lower()
    assert result.next_measurement is not None  # keeps suggesting
    assert result.to_json()["conditional_on_single_fault"] is True


def test_diode_test_ol_is_an_outcome(d):
    # An open diode's forward test shows OL on a meter whose open-circuit voltage it cannot
    # pass; the rows predicting OL gain from an OL reading, the others lose.
    key = next(k for k in d.channel_keys() if k[1] == "diode-test")
    ch = d.channel(*key)
    if not ch.over.any():
        pytest.skip("no row predicts OL on this board's diode tests")
    m = Measurement(key[0], QUANTITIES["diode-test"], None, ENGINE)
    result = diagnose(d, [m])
    over_hyps = {d.hypotheses[i].key for i in np.unique(d.row_hypothesis[ch.over])}
    assert not result.ignored
    assert result.top.key in over_hyps, (result.top.key, over_hyps)


def test_readings_that_fit_nothing_at_all_still_get_a_next_measurement(d):
    # No single reading left out explains the rest: the spreads are widened by the Birge
    # ratio for the suggestion (R. T. Birge, Phys. Rev. 40, 1932, from memory).
    result = diagnose(d, [dc("S1", 40.0), dc("S2", -7.0), dc("S3", 3.0)])
    assert result.fit.no_fit and result.fit.all_but_one is None
    assert result.next_measurement is not None
    assert result.next_measurement.gain_bits > 0


def test_a_session_off_prices_diode_tests_cheap_and_powered_readings_dear(d):
    from fieldtool.core.session import BoardSession

    saved = []
    s = BoardSession(PROFILE, "RK-1", d, lambda event, sid: saved.append(event))
    s.open()
    h = d.rows_of("healthy")[0]
    s.take(dc("S1", float(d.mean[h, 1])))
    on = s.diagnosis.worth
    s.power(False)  # off, discharged, every node verified below the safe level
    diode = next(k for k in d.channel_keys() if k[1] == "diode-test")
    s.take(_reading(d, h, diode))
    other = [k for k in d.channel_keys() if k[1] == "diode-test" and k != diode][0]
    off = s.diagnosis.worth
    assert off[other[0], "diode-test"] > 0
    assert off["S2", "dc"] < on["S2", "dc"]  # a powered reading now costs the re-power
    s.power(True)
    s.take(_reading(d, h, ("supply", "current", ())))
    assert {m.quantity.name for m in s.measurements()} == {"dc", "diode-test", "current"}
