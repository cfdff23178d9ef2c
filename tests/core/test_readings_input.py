"""The readings file as technicians and spreadsheets write it, and whatever else it may hold:
a tuple of finite measurements at this board's nodes, or one clear line (Hypothesis)."""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldtool.core.errors import InputError
from fieldtool.core.measurement import CONDITIONS, DC, QUANTITIES, RIPPLE_PP
from fieldtool.core.readings import parse_readings_csv

NODES = ("S0", "P1", "S1", "P2", "S2")
LABELS = {"S2": "HV"}


@pytest.mark.parametrize(
    "text, volts",
    [
        ("node,volts\nS1,125.7V\n", 125.7),
        ("node,volts\nS1,890mV\n", 0.89),
        ("node,volts\nS1,1.2kV\n", 1200.0),
        ('node,volts\nS1,"12,9"\n', 12.9),  # a decimal comma in quotes
        ("node;volts\nS1;12,9\n", 12.9),  # a spreadsheet's export where the comma is decimal
        ("node\tvolts\nS1\t12,9 V\n", 12.9),
    ],
)
def test_values_as_typed_readings_and_spreadsheets_write_them(text, volts):
    (m,) = parse_readings_csv(text, NODES)
    assert (m.at, m.quantity, m.value) == ("S1", DC, pytest.approx(volts))


def test_semicolon_file_with_ripple_and_overload():
    got = parse_readings_csv("node;volts;ripple_vpp\nHV;9,2;31mV\nP1;OL;\n", NODES, LABELS)
    assert [(m.at, m.quantity, m.value) for m in got] == [
        ("S2", DC, 9.2),
        ("S2", RIPPLE_PP, pytest.approx(0.031)),
        ("P1", DC, None),
    ]


@pytest.mark.parametrize(
    "text, words",
    [
        ("node,volts\nS1,12,9\n", "a decimal comma must be in quotes"),
        ("node,volts\nS1,12.9A\n", "understood the number 12.9 but not the unit 'A'"),
        ("node,volts\nS1,1e999\n", "'1e999' is not a finite number"),
        ("node,volts\nS1," + "9" * 100_000 + "\n", "… (100000 characters) is not a finite"),
        ("node,volts\n" + "Z" * 5000 + ",1\n", "node 'ZZZZ"),
        ("node,volts,ripple_vpp\nS1,3,OL\n", "ripple_vpp is OL; leave the cell empty"),
        ("node,volts,ripple_vpp\nS1,3,-1\n", "ripple_vpp -1 is negative"),
    ],
)
def test_what_cannot_be_read_is_one_short_line(text, words):
    with pytest.raises(InputError) as info:
        parse_readings_csv(text, NODES, where="r.csv")
    message = str(info.value)
    assert words in message and "\n" not in message and len(message) < 400


# The forms of a readings file, by header. The long form (measure,at,value[,test_load_ohms],
# one kind of reading a row) joins this list where it is parsed, so both forms meet the same
# property; its cells below are there already.
HEADERS = [
    ("node", "volts", "ripple_vpp"),
    ("node", "volts"),
    ("measure", "at", "value"),
    ("measure", "at", "value", "test_load_ohms"),
]

cells = st.one_of(
    st.sampled_from(["S0", "s1", "HV", "P2", "Q9", "", "OL", "node", "volts", "ripple_vpp"]),
    st.sampled_from(["dc", "ac-rms", "current", "dc-loaded", "diode-test", "supply", "D3"]),
    st.sampled_from(["12.9", "12,9", "890mV", "1.2kV", "-3.3V", "1e300", "nan", "inf", "9" * 400]),
    st.sampled_from(["47k", "0", "2mA", "350uA", "0.61", "1e-300", "-0", "1e999"]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.text(max_size=8),
)
rows = st.lists(st.lists(cells, min_size=1, max_size=4), max_size=6)


@settings(max_examples=400, deadline=None)
@given(st.sampled_from([",", ";", "\t"]), rows, st.none() | st.sampled_from(HEADERS))
def test_any_file_gives_finite_readings_at_this_board_s_nodes_or_one_line(sep, body, header):
    lines = ([sep.join(header)] if header else []) + [sep.join(r) for r in body]
    try:
        got = parse_readings_csv(
            "\n".join(lines), NODES, LABELS, "fuzz.csv", parts=("D1", "D2", "D3"), rails=("supply",)
        )
    except InputError as exc:
        assert str(exc).startswith("fuzz.csv") and "\n" not in str(exc)
        return
    assert got
    for m in got:
        assert m.quantity in QUANTITIES.values()
        assert m.at in NODES if m.quantity.taken_at == "node" else m.at
        assert m.value is None or math.isfinite(m.value)
        assert all(CONDITIONS[name].contains(value) for name, value in m.conditions)
