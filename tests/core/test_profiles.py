"""Profile validation: each class of mistake is refused with a message naming file and key."""

from pathlib import Path

import pytest

from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.errors import ProfileError
from tests.conftest import PROFILES, make_profile


def test_shipped_profiles_load():
    assert len(PROFILES) >= 3
    topologies = {load_profile(p).topology for p in PROFILES}
    polarities = {load_profile(p).polarity for p in PROFILES}
    assert {"dc-ladder", "ac-ladder"} <= topologies
    assert "negative" in polarities


@pytest.mark.parametrize(
    "sections, expected",
    [
        ({"board": {"stages": 0}}, "[board.stages] is 0, expected a whole number from 1 to 40"),
        ({"board": {"stages": 2.5}}, "[board.stages] is 2.5, expected a whole number"),
        ({"board": {"topology": "bridge"}}, "[board.topology] is 'bridge', expected one of"),
        ({"board": {"name": None}}, '[board.name] is missing: add `name = "..."`'),
        (
            {"capacitor": {"farads": -1e-6}},
            "[capacitor.farads] is -1e-06, expected 10 pF to 1 F (below 10 pF",
        ),
        (
            {"capacitor": {"tolerance": 1.0}},
            "[capacitor.tolerance] is 1, expected 0 or more and below 1",
        ),
        (
            {"drive": {"frequency_hz": 0}},
            "[drive.frequency_hz] is 0, expected 1 Hz or more and below 1 GHz",
        ),
        ({"drive": {"volts": "12"}}, "[drive.volts] is '12' (str), expected a number"),
        ({"drive": {"colour": "red"}}, "[drive.colour] is not a known key"),
        ({"load": {"amps": 0.001}}, "[load.amps] given together with ohms"),
        ({"load": {"ohms": None}}, "[load.ohms] is missing"),
        ({"supply": None}, "[supply] section is missing"),
        ({"extra": {"x": 1}}, "[extra] is not a known section"),
        ({"labels": {"S9": "TP9"}}, "node 'S9' is not on this board"),
        ({"overrides": {"D99": {"series_ohms": 1.0}}}, "designator 'D99' is not on this board"),
        ({"diode": {"forward_volts": 0.6}}, "given together with forward_volts"),
        ({"meter": {"range_volts": 0}}, "[meter.range_volts] is 0, expected 10 mV to 1 MV"),
        (
            {"meter": {"diode_test_amps": 0.5}},
            "[meter.diode_test_amps] is 0.5, expected 1 µA or more and below 100 mA",
        ),
        ({"meter": {"burden_ohms": -1}}, "[meter.burden_ohms] is -1, expected 0 Ω or more"),
        ({"meter": {"ac_bandwidth_hz": 0}}, "[meter.ac_bandwidth_hz] is 0, expected 1 Hz to"),
        ({"scope": {"probe_ohm": 1e6}}, "[scope.probe_ohm] is not a known key"),
        ({"test_loads": {"ohms": 10e3}}, "[test_loads.ohms] is 10000.0, expected a list"),
        ({"test_loads": {"ohms": []}}, "[test_loads.ohms] has 0 values, expected 1 to 8"),
        (
            {"test_loads": {"ohms": [10e3, 0]}},
            "[test_loads.ohms] holds a value that is 0, expected 1 Ω to 1 PΩ",
        ),
        ({"test_loads": {"ohms": [10e3, 10e3]}}, "[test_loads.ohms] lists a resistance twice"),
        (
            {"test_loads": {"ohms": [10e3], "rated_watts": [0.25, 1]}},
            "[test_loads.rated_watts] has 2 values for 1 loads",
        ),
        ({"test_loads": {"rated_watts": [0.25]}}, "[test_loads.ohms] is missing"),
        ({"efforts": {"current": 0}}, "[efforts.current] is 0, expected above 0 and below 1000"),
        ({"efforts": {"dc": "one"}}, "[efforts.dc] is 'one' (str), expected a number"),
        ({"efforts": {"scope": 2}}, "[efforts.scope] is not a known key"),
        (
            {"efforts": {"power_off": 5000}},
            "[efforts.power_off] is 5000, expected above 0 and below 1000",
        ),
    ],
)
def test_profile_mistakes_have_clear_messages(sections, expected):
    with pytest.raises(ProfileError) as info:
        make_profile(**sections)
    assert expected in str(info.value)
    assert str(info.value).startswith("<test>: ")


def test_meter_range_is_optional():
    assert make_profile().meter_range_volts is None
    assert make_profile(meter={"range_volts": 1000}).meter_range_volts == 1000.0


def test_instrument_settings_default_and_override():
    default = make_profile()
    assert default.test_loads == ()
    assert default.instruments.probe_ohms == 10e6  # a 10× passive scope probe
    p = make_profile(
        meter={"burden_ohms": 0.5, "diode_test_volts": 2.5},
        scope={"probe_farads": 15e-12},
        test_loads={"ohms": [10e3, 100e3], "rated_watts": [0.5, 0.25]},
    )
    assert (p.instruments.burden_ohms, p.instruments.diode_test_volts) == (0.5, 2.5)
    assert p.instruments.probe_farads == 15e-12
    assert [(t.ohms, t.rated_watts) for t in p.test_loads] == [(10e3, 0.5), (100e3, 0.25)]
    assert make_profile(test_loads={"ohms": [4.7e3]}).test_loads[0].rated_watts is None


def test_efforts_default_and_override():
    # The defaults are common practice, no source (README, "Finding the failed part").
    e = make_profile().efforts
    assert (e.dc, e.ripple_pp, e.dc_loaded, e.current, e.power_off, e.diode_test) == (
        1.0,
        1.5,
        3.0,
        4.0,
        6.0,
        1.0,
    )
    p = make_profile(efforts={"current": 1.5, "power_off": 12})
    assert (p.efforts.current, p.efforts.power_off, p.efforts.dc) == (1.5, 12.0, 1.0)
    assert p.efforts.of("dc-loaded") == 3.0 and p.efforts.of("current") == 1.5


def test_missing_file_and_bad_toml(tmp_path: Path):
    with pytest.raises(ProfileError, match="no such file"):
        load_profile(tmp_path / "absent.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[board\nname = 1\n")
    with pytest.raises(ProfileError, match=r"bad.toml: is not valid TOML"):
        load_profile(bad)


def test_forward_drop_form_gives_that_drop():
    # Shockley equation: I = Is (exp(V / (n Vt)) - 1) must return forward_amps at forward_volts.
    import math

    p = make_profile(
        diode={
            "saturation_current_a": None,
            "emission_coefficient": 2.0,
            "series_ohms": 0.0,
            "forward_volts": 0.6,
            "forward_amps": 0.001,
        }
    )
    d = p.diode
    i = d.saturation_current_a * math.expm1(0.6 / (d.emission_coefficient * p.thermal_volts))
    assert i == pytest.approx(0.001, rel=1e-12)


def test_digest_changes_with_content(tmp_path: Path):
    src = PROFILES[0].read_text()
    a, b = tmp_path / "a.toml", tmp_path / "b.toml"
    a.write_text(src)
    b.write_text(src.replace("stages = ", "stages =  "))
    assert load_profile(a).digest != load_profile(b).digest
