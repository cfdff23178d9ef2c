"""Parsers for typed readings, SCPI numbers and streamed lines."""

import pytest

from fieldtool.core.measurement import DC, TYPED, Source
from fieldtool.meters.errors import MeterGarbage, ReadingParseError
from fieldtool.meters.parse import parse_scpi_number, parse_typed
from fieldtool.meters.stream import stream_sample

METER = Source("meter", "ACME,DMM,1,1")


@pytest.mark.parametrize(
    ("text", "volts"),
    [
        ("12.9", 12.9),
        ("12.9V", 12.9),
        ("12.9 v", 12.9),
        ("  12.9 V  ", 12.9),
        ("890mV", 0.89),
        ("890 mv", 0.89),
        ("1.2kV", 1200.0),
        ("1.2KV", 1200.0),
        ("-3.3", -3.3),
        ("+5", 5.0),
        ("1e1", 10.0),
        ("2.5E-3V", 0.0025),
        ("12,9", 12.9),
        ("12,9 V", 12.9),
        (".5", 0.5),
        ("0", 0.0),
        ("350uV", 350e-6),
        ("350µV", 350e-6),
    ],
)
def test_typed_voltages(text, volts):
    reading = parse_typed(text)
    assert reading.value == pytest.approx(volts, rel=1e-12, abs=1e-15)
    assert reading.overload is False
    assert (reading.source, reading.settled, reading.at) == (TYPED, True, None)


@pytest.mark.parametrize("text", ["OL", "ol", "Overload", "OVERLOAD", " O.L. "])
def test_typed_overload(text):
    reading = parse_typed(text)
    assert reading.value is None
    assert reading.overload is True


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("", "nothing was typed"),
        ("   ", "nothing was typed"),
        ("abc", "'abc' is not a number with a unit"),
        ("12.9.1", "'12.9.1' is not a number with a unit"),
        ("1,234.5", "'1,234.5' is not a number with a unit"),
        ("12.9A", "understood the number 12.9 but not the unit 'A'"),
        ("12.9 ohm", "understood the number 12.9 but not the unit 'ohm'"),
        ("5MV", "understood the number 5 but not the unit 'MV'"),
        ("V", "'V' is not a number with a unit"),
        ("1e999", "'1e999' is not a finite number"),
        ("9" * 100_000, "… (100000 characters) is not a finite number"),
        ("9" * 5000 + "x", "understood the number '99999"),
        ("12 9", "'12 9' is not a number with a unit"),
    ],
)
def test_typed_refused(text, fragment):
    with pytest.raises(ReadingParseError) as info:
        parse_typed(text)
    assert fragment in info.value.message
    assert "expected a voltage such as 12.9" in info.value.message or "nothing" in fragment


@pytest.mark.parametrize(
    ("text", "volts"),
    [
        ("+1.23456789E+00\n", 1.23456789),
        ("-1.20000000E-03", -0.0012),
        ("12", 12.0),
        ("+12.500", 12.5),
        (" 4.7E1 \r\n", 47.0),
        ("+9.8E37", 9.8e37),
    ],
)
def test_scpi_numbers(text, volts):
    reading = parse_scpi_number(text, METER)
    assert reading.value == pytest.approx(volts, rel=1e-12)
    assert reading.overload is False


@pytest.mark.parametrize("text", ["+9.9E37", "-9.9E37", "9.91E37", "+9.90000000E+37\r\n", "1E38"])
def test_scpi_overload_is_never_a_voltage(text):
    reading = parse_scpi_number(text, METER)
    assert reading.value is None
    assert reading.overload is True


@pytest.mark.parametrize("text", ["", "OK", "\x00\xff", "1.2.3", "12,5", "-", "nan", "inf"])
def test_scpi_garbage(text):
    with pytest.raises(MeterGarbage, match="is not an IEEE 488.2 number"):
        parse_scpi_number(text, METER)


STREAM = r"(?P<value>[-+]?\d+(?:[.,]\d+)?|\bOL\b)\s*(?P<unit>[mkuµ]?V)?"


@pytest.mark.parametrize(
    ("line", "volts", "overload"),
    [
        ("12.34 V DC AUTO", 12.34, False),
        ("DC 890 mV", 0.89, False),
        ("1.2 kV", 1200.0, False),
        ("-0,513 V", -0.513, False),
        ("5", 5.0, False),
        ("OL V", None, True),
    ],
)
def test_stream_lines(line, volts, overload):
    reading = stream_sample(line, STREAM, METER, DC)
    assert reading is not None
    assert reading.overload is overload
    if volts is None:
        assert reading.value is None
    else:
        assert reading.value == pytest.approx(volts)


def test_stream_line_without_unit_group():
    reading = stream_sample("2024-01-01,3.30", r",(?P<value>[\d.]+)$", METER, DC)
    assert reading is not None and reading.value == pytest.approx(3.3)


@pytest.mark.parametrize("line", ["", "HOLD", "---- ----"])
def test_stream_non_matching_is_none(line):
    assert stream_sample(line, STREAM, METER, DC) is None


def test_stream_bad_unit_is_garbage():
    with pytest.raises(MeterGarbage, match="line '3.3 ohm': unit 'ohm' is neither volts nor amps"):
        stream_sample("3.3 ohm", r"(?P<value>[\d.]+) (?P<unit>\w+)", METER, DC)


def test_stream_bad_value_is_garbage():
    with pytest.raises(MeterGarbage, match="streamed value 'x.y' in line"):
        stream_sample("x.y V", r"(?P<value>\S+) V", METER, DC)


def test_stream_scpi_overload_number():
    reading = stream_sample("+9.9E37 V", r"(?P<value>\S+) (?P<unit>V)", METER, DC)
    assert reading is not None and reading.overload and reading.value is None
