"""What the profile loader refuses beyond wrong types: implausible numbers, names that collide,
names that cannot be files, and what it now accepts (a byte-order mark)."""

import pytest

from fieldtool.core.circuit.profile import load_profile_bytes
from fieldtool.core.errors import ProfileError
from tests.conftest import PROFILES, make_profile


@pytest.mark.parametrize(
    "sections, expected",
    [
        # absurd and non-finite numbers (TOML has nan and inf literals)
        ({"supply": {"volts": 1e300}}, "[supply.volts] is 1e+300, expected 0 V to 1.5 kV"),
        ({"drive": {"volts": float("inf")}}, "[drive.volts] is inf, expected a finite number"),
        ({"capacitor": {"stray_farads": float("nan")}}, "[capacitor.stray_farads] is nan"),
        ({"capacitor": {"farads": 2.2}}, "[capacitor.farads] is 2.2, expected 10 pF to 1 F"),
        ({"load": {"ohms": 0.5}}, "[load.ohms] is 0.5, expected 1 Ω to 1 PΩ"),
        ({"drive": {"volts": 10**400}}, "[drive.volts] is a 401-digit number"),
        ({"board": {"safe_volts": 500.0}}, "[board.safe_volts] is 500, expected 1 V to 120 V"),
        ({"meter": {"input_ohms": 10}}, "[meter.input_ohms] is 10, expected 1 kΩ to 10 PΩ"),
        (
            {"diode": {"emission_coefficient": 0.01}},
            "[diode.emission_coefficient] is 0.01, expected 0.5 or more and below 10",
        ),
        (
            # 4.9 V at 1 mA from one junction would need a saturation current of ~1e-56 A
            {
                "diode": {
                    "saturation_current_a": None,
                    "forward_volts": 4.9,
                    "forward_amps": 1e-3,
                    "emission_coefficient": 2.0,
                }
            },
            "[diode.forward_volts] 4.9 V at 0.001 A with emission_coefficient 2 means a",
        ),
        # names that collide: each would silently mean one of two parts or nodes
        ({"designators": {"D5": "D6"}}, "[designators.D5] 'D6' is also the name of part D6"),
        (
            {"designators": {"D5": "CR1", "D6": "cr1"}},
            "[designators.D6] 'cr1' is also the name of [designators.D5]",
        ),
        ({"designators": {"C2": "Drive"}}, "[designators.C2] 'Drive' is a board target's name"),
        ({"labels": {"S1": "TP1", "S2": "tp1"}}, "[labels.S2] 'tp1' is also the label of S1"),
        ({"labels": {"S3": "S1"}}, "[labels.S3] 'S1' is the name of node S1"),
        ({"labels": {"S3": "TP 3"}}, "[labels.S3] 'TP 3' contains ' '"),
        ({"designators": {"D1": "D:1"}}, "[designators.D1] 'D:1' contains ':'"),
        ({"labels": {"S3": "x" * 5000}}, "… (5000 characters) is 5000 characters long"),
        # the board's name becomes a folder name
        ({"board": {"name": "bench:1"}}, "[board.name] 'bench:1' contains ':'"),
        ({"board": {"name": "NUL"}}, "is a name Windows reserves for a device (NUL)"),
        ({"board": {"name": "ladder "}}, "has a space at the start or end"),
        ({"board": {"description": "two\nlines"}}, "expected one line of at most 200"),
    ],
)
def test_implausible_values_and_colliding_names_are_refused(sections, expected):
    with pytest.raises(ProfileError) as info:
        make_profile(**sections)
    assert expected in str(info.value)


def test_a_designator_may_keep_its_own_name_and_swapped_names_are_fine():
    assert make_profile(designators={"D5": "D5"}).designators == {"D5": "D5"}
    swapped = make_profile(designators={"D5": "D6", "D6": "D5"})
    assert swapped.designators == {"D5": "D6", "D6": "D5"}


def test_byte_order_mark_is_accepted():
    """Some Windows editors save UTF-8 with a byte-order mark; the CSV reader accepts it, and
    so does the profile loader."""
    raw = PROFILES[0].read_bytes()
    plain = load_profile_bytes(raw, "plain.toml")
    marked = load_profile_bytes(b"\xef\xbb\xbf" + raw, "marked.toml")
    assert marked.name == plain.name and marked.drive_volts == plain.drive_volts


def test_thousands_of_digits_are_one_clear_line():
    raw = PROFILES[0].read_bytes().replace(b"stages = ", b"stages = " + b"9" * 5000 + b"#", 1)
    with pytest.raises(ProfileError, match="holds a value TOML cannot read"):
        load_profile_bytes(raw, "huge.toml")
