"""Meter settings files."""

import pytest

from fieldtool.meters.errors import MeterSettingsError
from fieldtool.meters.settings import MeterSettings, SettleRule, load_settings, parse_settings


def test_defaults_suit_generic_scpi():
    s = parse_settings("")
    assert s == MeterSettings()
    assert (s.protocol, s.baud, s.terminator, s.read_command) == ("scpi", 9600, "\n", "READ?")
    assert s.settle == SettleRule(count=3, percent=0.2, volts=0.005, timeout_s=10)
    assert s.command_delay_s == 0.0


def test_full_file(tmp_path):
    path = tmp_path / "meter.toml"
    path.write_text(
        'protocol = "stream"\nbaud = 19200\nterminator = "\\r\\n"\n'
        'read_command = "MEAS:VOLT:DC?"\nstream_regex = "(?P<value>\\\\S+) V"\n'
        "timeout_s = 1\ncommand_delay_s = 0.2\n[settle]\ncount = 5\npercent = 0.1\n"
    )
    s = load_settings(path)
    assert s.command_delay_s == 0.2
    assert (s.protocol, s.baud, s.terminator, s.timeout_s) == ("stream", 19200, "\r\n", 1.0)
    assert s.settle.count == 5 and s.settle.percent == 0.1 and s.settle.volts == 0.005


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("bad = 1", "m.toml: unknown key 'bad'"),
        ("baud = '9600'", "m.toml: key 'baud' must be int, not str ('9600')"),
        ("[settle]\nwobble = 1", "m.toml: unknown key 'settle.wobble'"),
        ("[settle]\ncount = 1.5", "m.toml: key 'settle.count' must be int"),
        ("settle = 3", "m.toml: key 'settle' must be a table [settle]"),
        ("protocol = 'gpib'", "m.toml: protocol must be scpi or stream, not 'gpib'"),
        ("terminator = ';'", "m.toml: terminator must be"),
        ("baud = = 3", "m.toml: not valid TOML"),
        ("command_delay_s = -0.2", "m.toml: command_delay_s must be 0 to 10 seconds, not -0.2"),
        ("command_delay_s = '200ms'", "m.toml: key 'command_delay_s' must be float, not str"),
    ],
)
def test_refused(tmp_path, text, message):
    path = tmp_path / "m.toml"
    path.write_text(text)
    with pytest.raises(MeterSettingsError) as info:
        load_settings(path)
    assert info.value.message.startswith(f"{path}: ")
    assert message.removeprefix("m.toml: ") in info.value.message
