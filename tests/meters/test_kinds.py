"""Every kind of reading on the meter side: the dial's modes, the units streaming meters print,
typed readings in each kind's unit, the settings' set-up table and the settle band in amps.

The unit markings are those meters print for IEC 60417 symbols 5031 (DC, "=" or "⎓") and 5032
(AC, "~") in ASCII or Unicode (from memory), the words meters show (``AC``, ``DC``, ``DIODE``)
and the diode drawn as ``->|``; SCPI set-up commands are SCPI 1999.0 Vol. 2, CONFigure
(from memory), ``CONF:DIOD`` common practice, no source.
"""

from __future__ import annotations

import pytest

from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    QUANTITIES,
    RIPPLE_PP,
    Source,
)
from fieldtool.meters.errors import (
    MeterGarbage,
    MeterSettingsError,
    MeterTransientError,
    ReadingParseError,
    WrongMode,
)
from fieldtool.meters.modes import (
    AC_AMPS,
    AC_VOLTS,
    DC_AMPS,
    DC_VOLTS,
    DIODE,
    PEAK_TO_PEAK,
    UnknownMarking,
    mode_of,
    unit_marking,
)
from fieldtool.meters.parse import parse_typed
from fieldtool.meters.settings import (
    DEFAULT_STREAM_REGEX,
    MeterSettings,
    SettleRule,
    parse_settings,
)
from fieldtool.meters.settle import judge
from fieldtool.meters.stream import stream_sample

METER = Source("meter", "ACME,DMM,1,1")
LOAD = (("test_load_ohms", 47e3),)


def test_every_registered_kind_is_read_in_one_mode():
    for kind in QUANTITIES.values():
        assert kind.name in mode_of(kind).kinds
        assert mode_of(kind).unit == kind.unit


@pytest.mark.parametrize(
    ("text", "scale", "mode"),
    [
        ("V", 1.0, DC_VOLTS),
        ("mV", 1e-3, DC_VOLTS),
        ("V DC", 1.0, DC_VOLTS),
        ("VDC", 1.0, DC_VOLTS),
        ("V=", 1.0, DC_VOLTS),
        ("V ⎓", 1.0, DC_VOLTS),
        ("kV", 1e3, DC_VOLTS),
        ("V AC", 1.0, AC_VOLTS),
        ("VAC", 1.0, AC_VOLTS),
        ("mV~", 1e-3, AC_VOLTS),
        ("V ac", 1.0, AC_VOLTS),
        ("A", 1.0, DC_AMPS),
        ("mA", 1e-3, DC_AMPS),
        ("uA", 1e-6, DC_AMPS),
        ("µA DC", 1e-6, DC_AMPS),
        ("nA", 1e-9, DC_AMPS),
        ("V DIODE", 1.0, DIODE),
        ("V ->|", 1.0, DIODE),
        ("V ▶|", 1.0, DIODE),
        ("Vpp", 1.0, PEAK_TO_PEAK),
        ("mV p-p", 1e-3, PEAK_TO_PEAK),
        ("mA AC", 1e-3, AC_AMPS),
        ("A~", 1.0, AC_AMPS),
    ],
)
def test_unit_markings(text, scale, mode):
    assert unit_marking(text) == (pytest.approx(scale), mode)


def test_no_unit_is_no_marking():
    assert unit_marking("") is None and unit_marking("  ") is None


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("ohm", "neither volts nor amps"),
        ("Hz", "neither volts nor amps"),
        ("MV", "prefix"),
        ("V HOLD", "'HOLD' after the unit"),
        ("A DIODE", "'DIODE' after the unit"),
    ],
)
def test_unknown_markings(text, fragment):
    with pytest.raises(UnknownMarking, match=fragment):
        unit_marking(text)


@pytest.mark.parametrize(
    ("line", "asked", "kind", "value"),
    [
        # the kind is read from the line's unit, whatever was asked
        ("12.50 V DC", DC, DC, 12.5),
        ("0.123 V AC", DC, AC_RMS, 0.123),
        ("12,3 mV~", DC, AC_RMS, 0.0123),
        ("350 uA", DC, CURRENT, 350e-6),
        ("0.35 mA", AC_RMS, CURRENT, 0.35e-3),
        ("0.612 V DIODE", DC, DIODE_TEST, 0.612),
        ("0.612 V ->|", DC, DIODE_TEST, 0.612),
        ("6.5 mVpp", DC, RIPPLE_PP, 6.5e-3),
        ("OL V DIODE", DC, DIODE_TEST, None),
        # a line with no unit is of the kind asked for
        ("0.61", DIODE_TEST, DIODE_TEST, 0.61),
        ("OL", CURRENT, CURRENT, None),
        # DC volts while a reading under the test load is asked for is that reading
        ("121.3 V", DC_LOADED, DC_LOADED, 121.3),
    ],
)
def test_stream_kind_from_the_unit(line, asked, kind, value):
    conditions = LOAD if asked == DC_LOADED else ()
    sample = stream_sample(line, DEFAULT_STREAM_REGEX, METER, asked, conditions)
    assert sample is not None and sample.quantity == kind
    assert sample.conditions == (conditions if kind == asked else ())
    assert sample.value == (None if value is None else pytest.approx(value))


def test_stream_kind_stated_in_the_settings_overrides_an_unmarked_unit():
    # a meter that prints "V" in every mode: the settings say it is on AC volts
    sample = stream_sample("0.123 V", DEFAULT_STREAM_REGEX, METER, DC, stated=AC_RMS)
    assert sample is not None and (sample.quantity, sample.value) == (AC_RMS, 0.123)
    with pytest.raises(MeterGarbage, match="is not a voltage unit, and the meter settings say"):
        stream_sample("0.35 mA", DEFAULT_STREAM_REGEX, METER, DC, stated=AC_RMS)


def test_a_mode_no_kind_is_read_in_is_a_passing_problem():
    with pytest.raises(WrongMode, match="the meter shows AC current.*turn it to DC volts"):
        stream_sample("5 mA AC", DEFAULT_STREAM_REGEX, METER, DC)
    assert issubclass(WrongMode, MeterTransientError)  # the loop goes on reading


@pytest.mark.parametrize(
    ("text", "kind", "value"),
    [
        ("0.35mA", CURRENT, 0.35e-3),
        ("350uA", CURRENT, 350e-6),
        ("350 µA", CURRENT, 350e-6),
        ("0,00035", CURRENT, 0.00035),
        ("OL", CURRENT, None),
        ("0.61", DIODE_TEST, 0.61),
        ("610mV", DIODE_TEST, 0.61),
        ("OL", DIODE_TEST, None),
        ("12mV", AC_RMS, 0.012),
        ("31m", RIPPLE_PP, None),  # refused below: 'm' alone is not a unit
    ],
)
def test_typed_readings_in_each_kinds_unit(text, kind, value):
    if text == "31m":
        with pytest.raises(ReadingParseError, match="not the unit 'm'"):
            parse_typed(text, kind)
        return
    reading = parse_typed(text, kind)
    assert reading.quantity == kind and reading.settled
    assert reading.value == (None if value is None else pytest.approx(value))


def test_typed_reading_under_a_test_load_carries_it():
    reading = parse_typed("72.9", DC_LOADED, LOAD)
    assert reading.condition("test_load_ohms") == 47e3


def test_typed_current_refuses_volts_and_says_what_a_current_looks_like():
    with pytest.raises(ReadingParseError) as info:
        parse_typed("12V", CURRENT)
    assert "not the unit 'V'; expected a current such as 0.35mA" in info.value.message


def test_setup_commands_default_and_overridden():
    default = MeterSettings()
    assert [default.setup_command(q) for q in (DC, DC_LOADED, AC_RMS, CURRENT, DIODE_TEST)] == [
        "CONF:VOLT:DC",
        "CONF:VOLT:DC",
        "CONF:VOLT:AC",
        "CONF:CURR:DC",
        "CONF:DIOD",
    ]
    assert default.setup_command(RIPPLE_PP) == ""  # a DMM has no peak to peak
    given = parse_settings(
        'configure_command = "FUNC VOLT"\n'
        "[configure]\n"
        'diode-test = "SENS:FUNC DIOD"\n'
        'current = ""\n'
        'ripple-pp = "CONF:VOLT:PTP"\n'
    )
    assert given.setup_command(DC) == given.setup_command(DC_LOADED) == "FUNC VOLT"
    assert given.setup_command(DIODE_TEST) == "SENS:FUNC DIOD"
    assert given.setup_command(CURRENT) == ""
    assert given.setup_command(RIPPLE_PP) == "CONF:VOLT:PTP"


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ('[configure]\nohms = "CONF:RES"\n', "unknown kind 'ohms' (known kinds: dc, ripple-pp"),
        ("[configure]\ndc = 3\n", "key 'configure.dc' must be str, not int"),
        ('configure = "x"\n', "key 'configure' must be a table [configure]"),
        ('stream_kind = "ohms"\n', "stream_kind must be one of auto, dc"),
        ('check_errors = "yes"\n', "key 'check_errors' must be bool, not str"),
        ("[settle]\namps = -1\n", "settle.amps is -1, expected 0 A to 1 A"),
    ],
)
def test_settings_refused(text, fragment):
    with pytest.raises(MeterSettingsError) as info:
        parse_settings(text, "meter.toml")
    assert info.value.message.startswith("meter.toml: ") and fragment in info.value.message


def _samples(values, quantity):
    return [parse_typed(f"{v!r}", quantity) for v in values]


def test_settle_band_in_amps_uses_its_own_fixed_part():
    rule = SettleRule(count=3, percent=0.2, volts=0.005, amps=1e-6, trend=False)
    # 5 µA apart: inside 5 mV, far outside 1 µA + 0.2 %
    moving = [280e-6, 285e-6, 290e-6]
    assert not judge(_samples(moving, CURRENT), rule).settled
    steady = [280.0e-6, 280.2e-6, 280.1e-6]
    assert judge(_samples(steady, CURRENT), rule).settled


def test_settle_looks_only_at_the_latest_kind():
    rule = SettleRule(count=3, trend=False)
    samples = _samples([12.5, 12.5, 12.5], DC) + _samples([0.0123], AC_RMS)
    verdict = judge(samples, rule)
    assert verdict.quantity == AC_RMS and not verdict.settled and verdict.samples == 1
