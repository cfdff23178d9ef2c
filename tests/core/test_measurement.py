"""The one measurement type: its quantities, sources, checks, stored form and readings file."""

from __future__ import annotations

import json

import pytest
from hypothesis import given
from hypothesis import strategies as st

from fieldtool.core.errors import InputError
from fieldtool.core.measurement import (
    CONDITIONS,
    DC,
    QUANTITIES,
    RIPPLE_PP,
    TAKEN_AT,
    Measurement,
    Quantity,
    Source,
    quantity,
)
from fieldtool.core.readings import parse_readings_csv, readings_csv

NODES = ("S0", "P1", "S1", "P2", "S2")


def test_the_registry_holds_data_not_classes():
    assert set(QUANTITIES) == {"dc", "ripple-pp", "ac-rms", "current", "dc-loaded", "diode-test"}
    assert QUANTITIES["dc"] is DC and QUANTITIES["ripple-pp"] is RIPPLE_PP
    for q in QUANTITIES.values():
        assert type(q) is Quantity and q.taken_at in TAKEN_AT and q.unit in ("V", "A")
    assert not QUANTITIES["diode-test"].powered and QUANTITIES["diode-test"].taken_at == "part"
    assert QUANTITIES["dc-loaded"].conditions == ("test_load_ohms",)
    assert quantity(" DC ") is DC
    with pytest.raises(InputError, match="unknown measurement kind 'ac-volts'; known kinds: dc"):
        quantity("ac-volts")


def test_a_new_kind_is_one_more_entry():
    """What the next kinds need fits the same shape: a test load's ohms carried per reading,
    a power-off check at a part."""
    setting = "test_load_ohms"
    loaded = Quantity("dc-loaded", "V", "DC volts under a test load", "node", True, (setting,))
    m = Measurement("OUT", loaded, 72.9, Source("typed"), conditions=((setting, 10e3),))
    assert m.condition(setting) == 10e3
    with pytest.raises(InputError, match="needs the settings test_load_ohms, got none"):
        Measurement("OUT", loaded, 72.9, Source("typed"))
    # A setting is checked against its plausible range wherever the reading comes from.
    with pytest.raises(InputError, match="test_load_ohms is 0, expected 1 Ω to 1 PΩ"):
        Measurement("OUT", loaded, 72.9, Source("typed"), conditions=((setting, 0.0),))
    with pytest.raises(ValueError, match="no range in CONDITIONS"):
        Quantity("odd-loaded", "V", "odd", "node", True, ("load",))
    diode = Quantity("diode-test", "V", "diode test", "part", powered=False)
    assert Measurement("D5", diode, 0.61, Source("typed")).at == "D5"
    with pytest.raises(ValueError, match="taken_at"):
        Quantity("odd", "V", "odd", "somewhere", True)


@pytest.mark.parametrize(
    ("source", "text"),
    [
        (Source("typed"), "typed"),
        (Source("file", "bench.csv"), "file bench.csv"),
        (Source("meter", "ACME,DMM,1,1"), "ACME,DMM,1,1"),
        (Source("meter"), "meter"),
        (Source("simulated"), "simulated meter"),
        (Source("simulated", "FIELDTOOL,SIMULATED-METER,x,1"), "FIELDTOOL,SIMULATED-METER,x,1"),
    ],
)
def test_source_words(source, text):
    assert str(source) == text
    assert Source.from_json(json.loads(json.dumps(source.to_json()))) == source


@pytest.mark.parametrize(
    ("make", "words"),
    [
        (lambda: Measurement("S1", DC, float("inf"), Source("typed")), "finite"),
        (lambda: Measurement("S1", DC, "12", Source("typed")), "must be a number"),
        (lambda: Measurement("S1", DC, True, Source("typed")), "must be a number"),
        (lambda: Measurement("S1", DC, 1.0, Source("typed"), spread=-1.0), "negative"),
        (lambda: Measurement("S1", DC, 1.0, Source("typed"), samples=0), "at least 1"),
        (lambda: Source("guessed"), "unknown reading source"),
        (lambda: Measurement.from_fields({"quantity": "dc", "unit": "mV"}), "stored in 'mV'"),
        (lambda: Measurement.from_fields({"quantity": "dc", "source": "typed"}), "kind"),
        (lambda: Measurement.from_fields({"quantity": "volts"}), "unknown measurement kind"),
    ],
)
def test_what_cannot_be_a_measurement_is_refused(make, words):
    with pytest.raises(InputError, match=words):
        make()


def test_overload_and_unit():
    m = Measurement("S8", DC, None, Source("typed"))
    assert m.overload and m.unit == "V" and m.placed("S7").at == "S7"


finite = st.floats(allow_nan=False, allow_infinity=False, width=64)


@st.composite
def measurements(draw):
    q = draw(st.sampled_from(list(QUANTITIES.values())))

    def setting(name):
        r = CONDITIONS[name]
        return st.floats(min_value=r.low, max_value=r.high, allow_nan=False)

    return Measurement(
        at=draw(st.none() | st.sampled_from(NODES)),
        quantity=q,
        value=draw(st.none() | finite),
        source=draw(
            st.builds(Source, st.sampled_from(["typed", "file", "meter", "simulated"]), st.text())
        ),
        spread=draw(st.none() | st.floats(min_value=0, allow_infinity=False)),
        settled=draw(st.booleans()),
        samples=draw(st.integers(1, 1000)),
        taken=draw(st.none() | st.just("2026-03-02T08:01:00.000000Z")),
        conditions=tuple((name, draw(setting(name))) for name in q.conditions),
    )


@given(measurements())
def test_the_stored_form_reads_back_the_same(m):
    assert Measurement.from_fields(json.loads(json.dumps(m.to_fields()))) == m


def test_a_readings_file_gives_dc_and_ripple_measurements():
    text = "node,volts,ripple_vpp\nS0,5.01,\nS2,9.2,0.031\nP1,OL,\n"
    got = parse_readings_csv(text, NODES, where="bench.csv")
    source = Source("file", "bench.csv")
    assert got == (
        Measurement("S0", DC, 5.01, source, settled=True),
        Measurement("S2", DC, 9.2, source, settled=True),
        Measurement("S2", RIPPLE_PP, 0.031, source, settled=True),
        Measurement("P1", DC, None, source, settled=True),
    )
    assert parse_readings_csv(readings_csv(got), NODES, where="bench.csv") == got


def test_a_ripple_without_its_node_s_dc_is_written_in_the_long_form():
    alone = (Measurement("S1", RIPPLE_PP, 0.02, Source("file", "r.csv"), settled=True),)
    text = readings_csv(alone)
    assert text.splitlines()[0] == "measure,at,value"
    assert parse_readings_csv(text, NODES, where="r.csv") == alone


def test_an_integer_too_long_for_a_float_is_the_tools_error_not_an_overflow():
    # JSON allows integers of any length; a record an older version wrote may hold one
    # (found by the history loader's property test)
    with pytest.raises(InputError, match="not an integer that long"):
        Measurement("S3", DC, 10**400, Source("typed"))
    with pytest.raises(InputError, match="spread must be a finite number"):
        Measurement("S3", DC, 45.2, Source("typed"), spread=10**400)
