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
        ("command_delay_s = -0.2", "m.toml: command_delay_s is -0.2, expected 0 s to 10 s"),
        # non-finite and absurd numbers would hang the reading loop
        ("timeout_s = nan", "m.toml: timeout_s is nan, expected a finite number"),
        ("timeout_s = inf", "m.toml: timeout_s is inf, expected a finite number"),
        ("[settle]\ntimeout_s = 1e300", "settle.timeout_s is 1e+300, expected 100 ms to 3600 s"),
        ("[settle]\npercent = -inf", "settle.percent is -inf"),
        ("[settle]\ncount = 0", "settle.count must be 1 to 100, not 0"),
        ("baud = 0", "m.toml: baud must be 50 to 4000000, not 0"),
        (
            "baud = 99999999999999999999999",
            "baud must be 50 to 4000000, not 99999999999999999999999",
        ),
        ("baud = " + "9" * 5000, "m.toml: holds a number thousands of digits long"),
        # settings that cannot work
        ("stream_regex = '(?P<value>[0-9'", "stream_regex '(?P<value>[0-9' does not compile"),
        ("stream_regex = '[0-9.]+'", "stream_regex needs a named group (?P<value>...)"),
        ('read_command = "READ?\\nRST"', "read_command 'READ?\\nRST' must be printable ASCII"),
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


def test_byte_order_mark_and_encoding(tmp_path):
    path = tmp_path / "m.toml"
    path.write_bytes(b"\xef\xbb\xbfbaud = 19200\n")
    assert load_settings(path).baud == 19200
    path.write_bytes(b"baud = 19200 # \xff\n")
    with pytest.raises(MeterSettingsError, match="is not UTF-8 text"):
        load_settings(path)


def test_settle_trend_is_a_switch(tmp_path):
    path = tmp_path / "m.toml"
    path.write_text("[settle]\ntrend = false\n")
    assert load_settings(path).settle.trend is False
    path.write_text("[settle]\ntrend = 0.0\n")
    with pytest.raises(MeterSettingsError, match="key 'settle.trend' must be bool, not float"):
        load_settings(path)
