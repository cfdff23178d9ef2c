"""The one parser for values as technicians and spreadsheets write them (``parse_reading``),
shared by the typed entry, the readings file (either form) and streamed meter lines, and the
parser of a reading's settings (``parse_condition``): for any text, a finite value in the base
unit, an overload, or a one-line ValueError/InputError (Hypothesis); and what a value written
with a prefix says is what comes back.

The SI prefixes (n, µ, m, k, M, G) are those of the SI Brochure (BIPM, 9th edition, 2019,
table 7); ``u`` for micro is the common ASCII stand-in (common practice, no source).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldtool.core.errors import InputError
from fieldtool.core.measurement import CONDITIONS, QUANTITIES, parse_condition
from fieldtool.core.units import UNITS, parse_reading

PREFIX = {"n": 1e-9, "u": 1e-6, "µ": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3}  # SI Brochure, table 7
UNIT_SPELLINGS = {"V": ["V", "v"], "A": ["A", "a"], "Ω": ["Ω", "ohm", "ohms", "R"]}


def test_every_registered_unit_is_one_the_parser_reads():
    assert {q.unit for q in QUANTITIES.values()} | {r.unit for r in CONDITIONS.values()} <= set(
        UNITS
    )


@pytest.mark.parametrize(
    "text, base, value",
    [
        ("125.7V", "V", 125.7),
        ("890mV", "V", 0.89),
        ("12,9", "V", 12.9),
        (" 1.2 kV ", "V", 1200.0),
        ("350uA", "A", 350e-6),
        ("2,5 mA", "A", 2.5e-3),
        ("40nA", "A", 40e-9),
        ("47k", "Ω", 47e3),
        ("2.2MΩ", "Ω", 2.2e6),
        ("47 kohm", "Ω", 47e3),
        ("100 ohms", "Ω", 100.0),
        ("470R", "Ω", 470.0),
    ],
)
def test_values_as_written(text, base, value):
    assert parse_reading(text, base) == pytest.approx(value)


@pytest.mark.parametrize(
    "text, base, words",
    [
        ("1MV", "V", "not the unit 'MV'"),  # mega or milli shouted: refused, not guessed
        ("5mA", "V", "not the unit 'mA'"),  # amps where volts are read
        ("3Ω", "A", "not the unit 'Ω'"),
        ("1e999", "V", "is not a finite number"),
        ("12.9.1", "V", "is not a number with a unit"),
    ],
)
def test_what_is_refused_says_what(text, base, words):
    with pytest.raises(ValueError, match=words):
        parse_reading(text, base)


values = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False).filter(
    lambda x: x == 0 or abs(x) > 1e-9
)


@settings(max_examples=300, deadline=None)
@given(
    values,
    st.sampled_from(sorted(PREFIX)),
    st.sampled_from(sorted(UNIT_SPELLINGS)).flatmap(
        lambda u: st.tuples(st.just(u), st.sampled_from(UNIT_SPELLINGS[u]))
    ),
    st.booleans(),
    st.booleans(),
)
def test_a_value_written_with_a_prefix_and_unit_reads_back(x, prefix, unit, comma, space):
    base, spelling = unit
    number = repr(x)
    if comma:  # a decimal comma, as typed in much of Europe
        number = number.replace(".", ",")
    text = f"{number}{' ' if space else ''}{prefix}{spelling}"
    assert parse_reading(text, base) == pytest.approx(x * PREFIX[prefix], rel=1e-12, abs=0)


any_text = st.one_of(
    st.text(max_size=24),
    st.text(alphabet="0123456789.,eE+- kmMunµVAΩohsOLR", max_size=16),
    st.sampled_from(["OL", "o.l.", "nan", "inf", "-inf", "1e309", "9" * 100_000, "0x1p3"]),
    st.floats().map(repr),
)


@settings(max_examples=500, deadline=None)
@given(any_text, st.sampled_from(UNITS))
def test_any_text_is_a_finite_value_an_overload_or_one_line(text, base):
    try:
        value = parse_reading(text, base)
    except ValueError as exc:
        message = str(exc)
        assert message and "\n" not in message and len(message) < 300
        return
    assert value is None or math.isfinite(value)


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(sorted(CONDITIONS)), any_text)
def test_any_setting_is_in_its_range_or_one_line(name, text):
    try:
        value = parse_condition(name, text)
    except InputError as exc:
        message = str(exc)
        assert message.startswith(name) and "\n" not in message and len(message) < 300
        return
    assert CONDITIONS[name].contains(value)


@pytest.mark.parametrize(
    "text, words",
    [
        ("0", "test_load_ohms is 0, expected 1 Ω to 1 PΩ"),
        ("OL", "test_load_ohms is OL"),
        ("47kV", "not the unit 'kV'"),
    ],
)
def test_a_test_load_that_cannot_be_is_refused(text, words):
    with pytest.raises(InputError, match=words):
        parse_condition("test_load_ohms", text)
    assert parse_condition("test_load_ohms", "47k") == 47e3
