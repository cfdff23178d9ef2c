"""`fieldtool expect` on every shipped profile, and its errors."""

import json

import pytest

from fieldtool.cli import main
from tests.conftest import PROFILES


@pytest.mark.parametrize("profile", PROFILES, ids=lambda p: p.stem)
def test_expect_json_for_every_shipped_profile(profile, capsys):
    assert main(["expect", str(profile), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    names = [n["node"] for n in out["nodes"]]
    assert out["output_node"] in names
    assert out["converged"] is True
    for key in (
        "supply_current_a",
        "drive_current_a",
        "output_volts",
        "startup_s",
        "discharge_s",
        "stored_energy_j",
    ):
        assert key in out
    assert abs(out["output_volts"]) > max(abs(n["volts"]) for n in out["nodes"][:2])
    assert out["stored_energy_j"] > 0


def test_expect_text_table(capsys):
    assert main(["expect", str(PROFILES[0])]) == 0
    text = capsys.readouterr().out
    assert "CAUTION" in text and "expect DC" in text


def test_load_override_lowers_output(capsys):
    prof = next(p for p in PROFILES if "tidegauge" in p.name)
    main(["expect", str(prof), "--json"])
    light = json.loads(capsys.readouterr().out)["output_volts"]
    main(["expect", str(prof), "--json", "--load-ohms", "47000"])
    heavy = json.loads(capsys.readouterr().out)["output_volts"]
    assert heavy < light - 1.0


@pytest.mark.parametrize(
    "argv, message",
    [
        (["expect", "nope.toml"], "nope.toml: no such file"),
        (["expect", "PROFILE", "--load-ohms", "-5"], "--load-ohms: load is -5, expected 1 Ω"),
    ],
)
def test_expect_bad_input_one_line_exit_2(argv, message, capsys):
    argv = [str(PROFILES[0]) if a == "PROFILE" else a for a in argv]
    try:
        code = main(argv)
    except SystemExit as stop:  # an option argparse refuses (see fieldtool.commands.options)
        code = stop.code
    assert code == 2
    err = capsys.readouterr().err
    assert message in err
    assert err.count("\n") == 1 and "Traceback" not in err
