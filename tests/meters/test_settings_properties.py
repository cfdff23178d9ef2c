"""For any settings file and any port text, the meter-settings loader and the port opener return
something usable or raise the tool's own error (Hypothesis), and what they accept can drive a
meter: commands encode, the stream regex compiles and reads a meter's line, timeouts are
finite."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldtool.core.measurement import DC, Source
from fieldtool.meters.errors import MeterError, MeterSettingsError
from fieldtool.meters.settings import TERMINATORS, parse_settings
from fieldtool.meters.stream import StreamMeter, stream_sample
from fieldtool.meters.transport import open_port

KEYS = [
    "protocol",
    "baud",
    "terminator",
    "read_command",
    "configure_command",
    "stream_regex",
    "timeout_s",
    "command_delay_s",
]
SETTLE_KEYS = ["count", "percent", "volts", "timeout_s", "trend"]


def _toml(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    return '"' + value.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


values = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(0.001, 100.0),
    st.integers(-(10**30), 10**30),
    st.integers(0, 200_000),
    st.booleans(),
    st.text(
        alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"),
        max_size=20,
    ),
    st.sampled_from(
        [
            "scpi",
            "stream",
            "\n",
            "\r\n",
            "(?P<value>[-+0-9.]+)",
            "(?P<value>[0-9",
            "(?P<value>\\S+)\\s*(?P<unit>[mk]?V)",
            "[0-9]+",
            "MEAS:VOLT:DC?",
        ]
    ),
)


@st.composite
def settings_files(draw) -> str:
    top = draw(st.dictionaries(st.sampled_from(KEYS), values, max_size=4))
    settle = draw(st.none() | st.dictionaries(st.sampled_from(SETTLE_KEYS), values, max_size=3))
    lines = [f"{k} = {_toml(v)}" for k, v in top.items()]
    if settle is not None:
        lines += ["[settle]", *(f"{k} = {_toml(v)}" for k, v in settle.items())]
    return "\n".join(lines)


METER_LINES = ["12.345 V", "-0.3301V", "OL", "890 mV", "+1.2345E+01", "garbage", "nan V", ""]


@settings(max_examples=400, deadline=None)
@given(settings_files())
def test_settings_loader_accepts_only_settings_that_can_drive_a_meter(text):
    try:
        s = parse_settings(text, "fuzz.toml")
    except MeterSettingsError as exc:
        assert exc.message.startswith("fuzz.toml: ") and "\n" not in exc.message
        return
    for seconds in (s.timeout_s, s.command_delay_s, s.settle.timeout_s):
        assert math.isfinite(seconds) and 0 <= seconds <= 3600
    assert s.terminator in TERMINATORS and 50 <= s.baud <= 4_000_000
    assert 1 <= s.settle.count <= 100
    (s.read_command + s.terminator).encode("ascii")
    (s.configure_command + s.terminator).encode("ascii")
    meter = StreamMeter(open_port("loop://", s.baud, 0.1), s)
    try:
        for line in METER_LINES:
            try:
                stream_sample(line, meter.pattern, Source("meter", "fuzz"), DC)
            except MeterError:
                pass  # garbage named as garbage
    finally:
        meter.close()


@settings(max_examples=300, deadline=None)
@given(
    st.one_of(
        st.text(max_size=30),
        st.sampled_from(["foo://", "socket://", "socket://h:0", "rfc2217://:1", "loop://?x=1"]),
        st.builds(lambda s, rest: f"{s}://{rest}", st.text(max_size=8), st.text(max_size=12)),
    )
)
def test_any_port_text_opens_or_is_a_meter_error(text):
    if text.startswith(("/dev/", "hwgrep://")):
        return  # a real device here, or a search of this machine's ports: not for fuzzing
    try:
        transport = open_port(text, timeout=0.1)
    except MeterError as exc:
        assert "\n" not in exc.message
        return
    transport.close()


@pytest.mark.parametrize(
    "port, words",
    [
        ("foo://x", "foo:// is not a kind of port address pyserial knows"),
        ("socket://nohost", "it needs a host and a port number from 1 to 65535"),
        ("loop://?logging=loud", "pyserial does not take that address or its options"),
        ("", "nothing given"),
        ("x" * 5000, "… (5000 characters)"),
    ],
)
def test_ports_that_cannot_work_are_one_line(port, words):
    with pytest.raises(MeterSettingsError) as info:
        open_port(port, timeout=0.1)
    assert words in info.value.message and "\n" not in info.value.message
