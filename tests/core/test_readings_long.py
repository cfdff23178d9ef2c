"""The long form of the readings file: ``measure,at,value[,test_load_ohms]``, any kind.

Real files in ``tmp_path``; SI prefixes as the technician types them (SI Brochure, 9th ed.,
BIPM 2019, Table 7, for the prefixes); every bad row refused with where and how to fix it.
"""

import pytest
from hypothesis import given
from hypothesis import strategies as st

from fieldtool.core.errors import InputError
from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    RIPPLE_PP,
    Measurement,
    Source,
)
from fieldtool.core.readings import load_readings, parse_readings_csv, readings_csv

NODES = ("S0", "P1", "S1", "P2", "S2", "P3", "S3")
LABELS = {"S3": "TP7"}
PARTS = ("D1", "D2", "CR5")
RAILS = ("supply", "drive")

# The example, with prefixes and units where a technician would type them.
EXAMPLE = """measure,at,value,test_load_ohms
# bench, board 0412
dc,S3,45.2
ripple-pp,S3,31mV
ac-rms,tp7,0.009V
current,Supply,0.35mA
dc-loaded,S2,72.9,10k
diode-test,cr5,0.61
diode-test,D2,OL
"""


def _parse(text, **kw):
    return parse_readings_csv(text, NODES, LABELS, "bench.csv", None, PARTS, RAILS, **kw)


def test_the_long_form_reads_every_kind():
    got = _parse(EXAMPLE)
    src = Source("file", "bench.csv")
    load = (("test_load_ohms", 10000.0),)
    assert got[1].value == pytest.approx(0.031, rel=1e-12)
    assert got[3].value == pytest.approx(0.00035, rel=1e-12)
    assert got == (
        Measurement("S3", DC, 45.2, src, settled=True),
        Measurement("S3", RIPPLE_PP, got[1].value, src, settled=True),
        Measurement("S3", AC_RMS, 0.009, src, settled=True),
        Measurement("supply", CURRENT, got[3].value, src, settled=True),
        Measurement("S2", DC_LOADED, 72.9, src, settled=True, conditions=load),
        Measurement("CR5", DIODE_TEST, 0.61, src, settled=True),
        Measurement("D2", DIODE_TEST, None, src, settled=True),
    )


def test_a_long_form_file_on_disk_and_back(tmp_path):
    path = tmp_path / "bench.csv"
    path.write_text(EXAMPLE, encoding="utf-8")
    got = load_readings(path, NODES, LABELS, PARTS, RAILS)
    again = tmp_path / "again.csv"
    again.write_text(readings_csv(got), encoding="utf-8")
    assert load_readings(again, NODES, LABELS, PARTS, RAILS) == tuple(
        Measurement(
            m.at,
            m.quantity,
            m.value,
            Source("file", "again.csv"),
            settled=True,
            conditions=m.conditions,
        )
        for m in got
    )


@pytest.mark.parametrize(
    "row, message",
    [
        ("volts,S3,45", "unknown measurement kind 'volts'"),
        ("dc,S9,45", "node 'S9' is not on this board"),
        ("dc,,45", "no place"),
        ("current,OUT,1m", "it is read at supply, drive"),
        ("diode-test,D9,0.6", "part 'D9' is not a diode of this board"),
        ("dc-loaded,S3,40", "needs the test load's resistance"),
        ("dc-loaded,S3,40,ten k", "is not a number with a unit; write it as e.g. 47k"),
        ("dc-loaded,S3,40,0", "expected 1 Ω to 1 PΩ"),
        ("dc,S3,45,10k", "goes with dc-loaded rows only"),
        ("dc,S3,45 A", "not understood for dc"),
        ("current,supply,3 mV", "not understood for current"),
        ("dc,S3,3MV", "not understood"),
        ("ripple-pp,S3,-2mV", "is negative"),
        ("dc,S3,45,2", "goes with dc-loaded rows only"),
    ],
)
def test_bad_rows_say_where_and_how(row, message):
    with pytest.raises(InputError, match=message) as info:
        _parse("measure,at,value,test_load_ohms\n" + row + "\n")
    assert "bench.csv:2" in info.value.message


def test_a_place_and_kind_read_twice_is_refused():
    with pytest.raises(InputError, match="read twice"):
        _parse("measure,at,value\ndc,S3,45\ndc,tp7,45.1\n")
    # the same node under two different test loads is two readings
    two = _parse("measure,at,value,test_load_ohms\ndc-loaded,S3,40,10k\ndc-loaded,S3,30,4.7k\n")
    assert len(two) == 2


def test_a_wrong_header_names_both_forms():
    with pytest.raises(InputError, match="'measure,at,value'"):
        _parse("kind,where,value\ndc,S3,45\n")
    with pytest.raises(InputError, match="optional 'test_load_ohms'"):
        _parse("measure,at,value,load\ndc,S3,45,\n")


finite = st.floats(-1e4, 1e4, allow_nan=False).map(lambda v: round(v, 6))


@given(
    st.lists(
        st.tuples(
            st.sampled_from(["dc", "ripple-pp", "current", "dc-loaded", "diode-test"]),
            st.integers(0, 6),
            finite | st.none(),
        ),
        min_size=1,
        max_size=8,
        unique_by=lambda t: (t[0], t[1]),
    )
)
def test_whatever_is_written_reads_back_the_same(rows):
    kinds = {
        "dc": DC,
        "ripple-pp": RIPPLE_PP,
        "current": CURRENT,
        "dc-loaded": DC_LOADED,
        "diode-test": DIODE_TEST,
    }
    src = Source("file", "bench.csv")
    ms = []
    for name, i, value in rows:
        q = kinds[name]
        if q == RIPPLE_PP and value is not None:
            value = abs(value)
        at = {"node": NODES[i], "rail": RAILS[i % 2], "part": PARTS[i % 3]}[q.taken_at]
        cond = (("test_load_ohms", 4700.0 + i),) if q == DC_LOADED else ()
        ms.append(Measurement(at, q, value, src, settled=True, conditions=cond))
    keys = [(m.quantity.name, m.at, m.conditions) for m in ms]
    if len(set(keys)) != len(keys):
        return

    # the short form writes a node's DC before its ripple: the same readings, maybe reordered
    def key(m):
        return (m.quantity.name, m.at, m.conditions)

    assert sorted(_parse(readings_csv(ms)), key=key) == sorted(ms, key=key)
