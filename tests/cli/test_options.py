"""Every command-line option: a number takes a checked type, and any text either parses to a
plausible value or is one line on stderr with exit code 2 (Hypothesis over every option)."""

from __future__ import annotations

import argparse
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldtool.cli import build_parser, main


def _subparsers(parser: argparse.ArgumentParser):
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield name, sub
                for deeper, subsub in _subparsers(sub):
                    yield f"{name} {deeper}", subsub


def _typed_options():
    found = []
    for name, sub in _subparsers(build_parser()):
        for action in sub._actions:
            if action.type is not None and action.option_strings:
                found.append((name, action.option_strings[-1], action.type))
    return found


TYPED = _typed_options()


def test_no_option_takes_a_bare_float_or_int():
    assert TYPED, "no typed options found: the walk over the parser is broken"
    bare = [(cmd, opt) for cmd, opt, kind in TYPED if kind in (float, int)]
    assert bare == [], f"options without a plausible range: {bare}"
    assert {opt for _, opt, _ in TYPED} >= {"--load-ohms", "--baud", "--seed", "--command-gap"}
    assert "--technician" in {opt for _, opt, _ in TYPED}


option_text = st.one_of(
    st.text(max_size=20),
    st.sampled_from(["nan", "inf", "-inf", "1e300", "-1", "0", "1e-300", "470k", "9" * 5000]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-(10**40), 10**40).map(str),
)


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(TYPED), option_text)
def test_any_text_is_a_plausible_value_or_one_line_and_exit_2(typed, text):
    command, option, kind = typed
    try:
        value = kind(text)
    except argparse.ArgumentTypeError as exc:
        message = str(exc)
        assert "\n" not in message and len(message) < 400
        return
    if isinstance(value, str):  # a name (--technician): one short printable line
        assert value.strip() == value and value.isprintable() and 0 < len(value) <= 60
        return
    assert isinstance(value, int | float) and math.isfinite(value)
    assert kind(str(value)) == value  # what it accepted reads back the same


@pytest.mark.parametrize(
    "argv, words",
    [
        (["expect", "tidegauge-apd-bias", "--load-ohms", "0"], "--load-ohms: load is 0"),
        (["expect", "tidegauge-apd-bias", "--load-ohms", "nan"], "'nan' is not a number"),
        (["sim-meter", "tidegauge-apd-bias", "--seed", "-1"], "--seed: seed -1 is out of range"),
        (["sim-meter", "tidegauge-apd-bias", "--command-gap", "nan"], "--command-gap: 'nan'"),
        (["read", "--port", "loop://", "--baud", "0"], "--baud: baud 0 is out of range"),
        (["demo", "--seed", "9" * 5000], "… (5000 characters) is not a whole number"),
    ],
)
def test_bad_numbers_are_one_line_and_exit_2(capsys, argv, words):
    with pytest.raises(SystemExit) as stop:
        main(argv)
    err = capsys.readouterr().err
    assert stop.value.code == 2
    assert err.count("\n") == 1 and words in err
    assert "bad profile" not in err  # an option is not the profile's fault


def test_top_level_help_is_written_for_a_technician(capsys):
    with pytest.raises(SystemExit):
        main(["--help"])
    out = capsys.readouterr().out
    assert "thin shell" not in out and "entry point" not in out
    for words in ("fieldtool demo", "fieldtool probe PROFILE --board SERIAL", "--help"):
        assert words in out
    assert "WARNING: Stored charge can kill" in out


@pytest.mark.parametrize(
    "command, words",
    [
        (["ports"], "List the serial ports"),
        (["read"], "Take one reading from a meter"),
        (["demo"], "fieldtool-demo in the system's temporary folder"),
    ],
)
def test_commands_say_what_they_do(capsys, command, words):
    with pytest.raises(SystemExit):
        main([*command, "--help"])
    out = " ".join(capsys.readouterr().out.split())  # argparse wraps lines
    assert words in out
