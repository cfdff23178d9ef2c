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
    # The readings beyond DC volts, beside the keys above.
    for n in out["nodes"]:
        assert n["ripple_pp_scope_volts"] >= 0 and n["ac_rms_volts"] >= 0
        assert len(n["test_loads"]) == len(out["test_loads"])
    assert out["diode_tests"] and "power_off" in out["cautions"]
    for d in out["diode_tests"]:
        forward = d["forward"]
        assert forward["lift_one_leg"] or 0.1 < forward["volts"] < 1.0  # a forward drop


def test_expect_text_table(capsys):
    assert main(["expect", str(PROFILES[0])]) == 0
    text = capsys.readouterr().out
    assert "CAUTION" in text and "expect DC" in text


@pytest.mark.parametrize(
    "board, words",
    [
        # A 3.3 V to 15 V pump never holds 50 V: no "below 50 V in 0 ns".
        ("datalogger-eeprom-dickson", "after power-off, already below 50 V"),
        ("tidegauge-apd-bias", "after power-off, below 50 V in "),
    ],
)
def test_the_discharge_figure_reads_as_words(capsys, board, words):
    assert main(["expect", board]) == 0
    text = capsys.readouterr().out
    assert words in text and " in 0 " not in text and " 0 ns" not in text


def test_expect_shows_test_loads_with_their_power_and_the_diode_tests(capsys):
    prof = next(p for p in PROFILES if "tidegauge" in p.name)
    assert main(["expect", str(prof)]) == 0
    text = capsys.readouterr().out
    # 100 kΩ at the 125.8 V output: V²/R = 158 mW (Joule's law), within its 250 mW rating.
    assert "test load 100 kΩ takes 158.3 mW at 125.8 V (rated 250 mW)" in text
    assert "OVER ITS RATING" not in text
    assert "Clip a test load on only with the board off" in text
    assert "D1 … D16  forward 0.581 V, reverse OL" in text
    assert "drive-rail current, meter in the driver's own supply rail" in text
    assert "verify every node reads below 50 V" in text
    main(["expect", str(prof), "--json"])
    out = json.loads(capsys.readouterr().out)
    assert [t["ohms"] for t in out["test_loads"]] == [100e3, 47e3]
    loaded = out["nodes"][-1]["test_loads"]
    assert loaded[1]["volts"] < loaded[0]["volts"] < out["nodes"][-1]["volts"]
    # A 2 Ω burden in a 15 V supply lead moves the current by far less than 1 %.
    assert out["supply_current_metered_a"] == pytest.approx(out["supply_current_a"], rel=0.01)


def test_expect_says_lift_one_leg_behind_a_large_capacitor(tmp_path, capsys):
    # 10 mF on one stage: D1's reading climbs for C·V/I ≈ 6 s (see test_readouts_ngspice).
    path = tmp_path / "big.toml"
    path.write_text(
        '[board]\nname = "big"\ntopology = "dc-ladder"\nstages = 1\n[supply]\nvolts = 5.0\n'
        "[drive]\nvolts = 5.0\nfrequency_hz = 1000.0\nsource_ohms = 2.0\n"
        "[diode]\nforward_volts = 0.6\nforward_amps = 0.001\n"
        "[capacitor]\nfarads = 10e-3\ntolerance = 0.2\n[load]\nohms = 1000.0\n"
        "[test_loads]\nohms = [10.0]\nrated_watts = [0.25]\n"
    )
    assert main(["expect", str(path)]) == 0
    text = capsys.readouterr().out
    assert "D1        lift one leg to test this part: the reading takes" in text
    assert "OVER ITS RATING" in text  # ~8 V on 10 Ω is about 6 W


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
