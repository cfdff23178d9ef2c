"""`fieldtool inject`, `diagnose` and `calibrate` through fieldtool.cli.main, every shipped board.

Fault dictionaries of the shipped profiles take seconds each to build cold, so every test here
passes the session's shared cache folder (``dictionary_cache`` in conftest).
"""

from __future__ import annotations

import contextlib
import io
import json
from dataclasses import replace

import pytest

from fieldtool.cli import main
from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.diagnosis.faults import catalog
from tests.conftest import PROFILES

FAULT = "D2:open"  # on every topology: stage 1's output diode (ladders), P1 → P2 (Dickson)
DICKSON = next(p for p in PROFILES if "dickson" in p.name)
DC_LADDER = next(p for p in PROFILES if "driftbuoy" in p.name)


def _run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def _json(argv: list[str]) -> dict:
    code, out, err = _run(argv)
    assert code == 0, err
    return json.loads(out)


@pytest.fixture(scope="module")
def injected():
    """`inject --json` output per shipped profile (computed once, used by several tests)."""
    return {p.stem: _json(["inject", str(p), "--fault", FAULT, "--json"]) for p in PROFILES}


# --- inject -------------------------------------------------------------------------------


@pytest.mark.parametrize("profile", PROFILES, ids=lambda p: p.stem)
def test_inject_json_is_expect_plus_the_fault(profile, injected):
    healthy = _json(["expect", str(profile), "--json"])
    faulted = injected[profile.stem]
    assert set(faulted) - set(healthy) >= {"fault"}
    assert set(healthy) <= set(faulted)
    assert faulted["fault"] == FAULT
    assert [n["node"] for n in faulted["nodes"]] == [n["node"] for n in healthy["nodes"]]
    for node in faulted["nodes"]:
        assert set(node) == set(healthy["nodes"][0])
    assert faulted["converged"] is True
    # an open diode early in the chain starves everything after it
    assert abs(faulted["output_volts"]) < abs(healthy["output_volts"]) - 1.0


def test_inject_bad_fault_is_one_line_exit_2():
    code, out, err = _run(["inject", str(PROFILES[0]), "--fault", "D99:open"])
    assert code == 2 and out == ""
    assert "not on this board" in err
    assert err.count("\n") == 1 and "Traceback" not in err


# --- diagnose -----------------------------------------------------------------------------


def _readings_csv(tmp_path, nodes, volts_by_node) -> str:
    path = tmp_path / "readings.csv"
    rows = ["node,volts"] + [f"{n},{volts_by_node[n]!r}" for n in nodes]
    path.write_text("\n".join(rows) + "\n")
    return str(path)


@pytest.mark.parametrize("profile", PROFILES, ids=lambda p: p.stem)
def test_diagnose_json_shape(profile, injected, dictionary_cache, tmp_path):
    faulted = injected[profile.stem]
    volts = {n["node"]: n["volts"] for n in faulted["nodes"]}
    names = list(volts)
    read = [names[0], names[len(names) // 2], faulted["output_node"]]
    csv = _readings_csv(tmp_path, read, volts)
    out = _json(
        ["diagnose", str(profile), "--readings", csv, "--cache", str(dictionary_cache), "--json"]
    )

    board = load_profile(profile)
    circuit, _ = build_circuit(board)
    suspects = out["suspects"]
    assert len(suspects) == len(catalog(board, circuit))  # every hypothesis carries its odds
    probs = [s["probability"] for s in suspects]
    assert probs == sorted(probs, reverse=True)
    assert sum(probs) == pytest.approx(1.0, abs=1e-4)
    assert all(0.0 <= p <= 1.0 for p in probs)
    healthy = [s for s in suspects if s["mode"] == "healthy"]
    assert len(healthy) == 1 and healthy[0]["component"] is None
    assert all(isinstance(s["component"], str) for s in suspects if s["mode"] != "healthy")
    assert out["next_probe"] is None or (
        out["next_probe"] in names and out["next_probe"] not in read
    )
    assert isinstance(out["ambiguity"], list)
    for group in out["ambiguity"]:
        assert len(group) >= 2 and all(isinstance(k, str) for k in group)
        assert all(k == "healthy" or ":" in k for k in group)
    fit = out["fit"]
    assert 0.0 <= fit["score"] <= 1.0 and isinstance(fit["no_fit"], bool)
    assert isinstance(fit["text"], str) and fit["text"]


def test_diagnose_text_has_the_caution(injected, dictionary_cache, tmp_path):
    faulted = injected[DICKSON.stem]
    volts = {n["node"]: n["volts"] for n in faulted["nodes"]}
    csv = _readings_csv(tmp_path, list(volts)[:2], volts)
    code, out, err = _run(
        ["diagnose", str(DICKSON), "--readings", csv, "--cache", str(dictionary_cache)]
    )
    assert code == 0, err
    assert "most likely:" in out and "CAUTION" in out


@pytest.mark.parametrize(
    "text, message",
    [
        ("node,volts\nX9,1.0\n", "node 'X9' is not on this board"),
        ("node,volts\nP1,abc\n", "volts: 'abc' is not a number with a unit"),
        ("volts,node\n1.0,P1\n", "expected 'node,volts'"),
    ],
)
def test_diagnose_bad_readings_one_line_exit_2(text, message, dictionary_cache, tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    code, out, err = _run(
        ["diagnose", str(DICKSON), "--readings", str(path), "--cache", str(dictionary_cache)]
    )
    assert code == 2 and out == ""
    assert message in err and str(path) in err
    assert err.count("\n") == 1 and "Traceback" not in err


# --- calibrate ----------------------------------------------------------------------------


def _golden_csv(tmp_path, profile_path, drive_factor: float) -> str:
    """Readings of a board whose drive is ``drive_factor`` of its profile's (as expected)."""
    board = load_profile(profile_path)
    real = replace(board, drive_volts=board.drive_volts * drive_factor)
    volts = {n.node: n.volts for n in expect(real).nodes}
    return _readings_csv(tmp_path, list(volts), volts)


def test_calibrate_writes_a_loadable_profile_and_refuses_to_overwrite(tmp_path):
    csv = _golden_csv(tmp_path, DICKSON, 0.97)
    out_path = tmp_path / "fitted.toml"
    args = ["calibrate", str(DICKSON), "--readings", csv, "--out", str(out_path)]
    summary = _json(args + ["--json"])
    fitted = load_profile(out_path)
    original = load_profile(DICKSON)
    assert fitted.name == original.name and fitted.stages == original.stages
    assert fitted.drive_volts == pytest.approx(original.drive_volts * 0.97, rel=0.005)
    assert summary["drive_volts"] == pytest.approx(fitted.drive_volts)
    assert summary["rms_residual_volts"] < original.meter_volts
    assert set(summary["residuals"]) == {n.node for n in expect(original).nodes}

    before = out_path.read_bytes()
    code, out, err = _run(args)
    assert code == 2 and out == ""
    assert "--force" in err and str(out_path) in err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert out_path.read_bytes() == before

    code, out, err = _run(args + ["--force"])
    assert code == 0, err
    assert f"wrote {out_path}" in out and "residual" in out
    load_profile(out_path)


def test_calibrate_dc_ladder_says_what_it_cannot_split(tmp_path):
    csv = _golden_csv(tmp_path, DC_LADDER, 0.97)
    out_path = tmp_path / "fitted.toml"
    code, out, err = _run(["calibrate", str(DC_LADDER), "--readings", csv, "--out", str(out_path)])
    assert code == 0, err
    assert "note: these readings fix only the drive swing less the diode drops" in out
    load_profile(out_path)


@pytest.mark.parametrize(
    "text, message",
    [
        ("node,volts\nQ7,1.0\n", "node 'Q7' is not on this board"),
        ("node,volts\nS0,3.3\nP1,1;2\n", "volts: '1;2' is not a number with a unit"),
        ("node|volts\nS0|3.3\n", "expected 'node,volts'"),
        ("node,volts\nS0,3.3\n", "two or more nodes"),
        ("", "no readings"),
    ],
)
def test_calibrate_bad_readings_one_line_exit_2(text, message, tmp_path):
    path = tmp_path / "golden.csv"
    path.write_text(text)
    out_path = tmp_path / "fitted.toml"
    code, out, err = _run(
        ["calibrate", str(DICKSON), "--readings", str(path), "--out", str(out_path)]
    )
    assert code == 2 and out == ""
    assert message in err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert not out_path.exists()


def test_calibrate_missing_readings_file(tmp_path):
    missing = tmp_path / "nope.csv"
    code, _, err = _run(
        ["calibrate", str(DICKSON), "--readings", str(missing), "--out", str(tmp_path / "o.toml")]
    )
    assert code == 2 and "readings file not found" in err and err.count("\n") == 1


# --- coverage -----------------------------------------------------------------------------


@pytest.mark.parametrize("profile", [DICKSON, DC_LADDER], ids=lambda p: p.stem)
def test_coverage_lists_every_fault_and_what_finds_it(profile, dictionary_cache):
    out = _json(["coverage", str(profile), "--json", "--cache", str(dictionary_cache)])
    hyps = catalog(load_profile(profile), build_circuit(load_profile(profile))[0])
    assert {f["fault"].split(":")[1] for f in out["faults"]} == {
        h.mode for h in hyps if h.target is not None
    }
    assert "dc" in out["kinds"]
    for f in out["faults"]:
        assert set(f["found_by"]) <= set(out["kinds"])
        assert (f["fault"] in out["not_findable"]) <= (not f["found_by"])
    code, text, err = _run(["coverage", str(profile), "--cache", str(dictionary_cache)])
    assert code == 0 and err == ""
    assert "beyond 3x the spread" in text
    first = out["faults"][0]
    assert any(line.startswith(first["words"]) for line in text.splitlines())


def test_coverage_of_a_missing_profile_is_one_line_exit_2(tmp_path):
    code, out, err = _run(["coverage", str(tmp_path / "nope.toml")])
    assert code == 2 and out == "" and err.count("\n") == 1


# --- long-form readings -------------------------------------------------------------------


def _long_form(tmp_path, faulted: dict) -> str:
    """Every kind `inject` predicts for the faulted board, in the long form with units."""
    out = faulted["output_node"]
    rows = ["measure,at,value"]
    rows += [f"dc,{n['node']},{n['volts']!r}" for n in faulted["nodes"]]
    node = next(n for n in faulted["nodes"] if n["node"] == out)
    rows.append(f"ripple-pp,{out},{node['ripple_pp_scope_volts'] * 1e3!r}mV")
    rows.append(f"current,supply,{faulted['supply_current_metered_a'] * 1e3!r}mA")
    first = faulted["diode_tests"][0]
    volts = first["forward"]["volts"]
    rows.append(f"diode-test,{first['designator']},{'OL' if volts is None else repr(volts)}")
    path = tmp_path / "long.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return str(path)


def test_diagnose_reads_the_long_form_and_names_the_next_measurement(dictionary_cache, tmp_path):
    faulted = _json(["inject", str(DC_LADDER), "--fault", "C4:lowcap=0.1", "--json"])
    csv = _long_form(tmp_path, faulted)
    argv = ["diagnose", str(DC_LADDER), "--readings", csv, "--cache", str(dictionary_cache)]
    out = _json(argv + ["--json"])
    kinds = {"dc", "ripple-pp", "current", "diode-test"}
    assert not out["ignored"]
    assert {w["quantity"] for w in out["worth"]} <= kinds | {"ac-rms"}
    nxt = out["next_measurement"]
    assert nxt is None or {"at", "quantity", "conditions", "words", "caution"} <= set(nxt)
    code, text, err = _run(argv)
    assert code == 0, err
    for kind in kinds:
        assert f" {kind}" in text
    assert "next: " in text and ("CAUTION" in text or "WARNING" in text)
    if nxt is not None and nxt["caution"]:
        # under the board's signal word (this board's output passes the safe level)
        assert f"WARNING: {nxt['caution']}" in text


def test_calibrate_takes_the_long_form_and_says_what_it_left_out(tmp_path):
    board = load_profile(DICKSON)
    rows = ["measure,at,value"] + [f"dc,{n.node},{n.volts!r}V" for n in expect(board).nodes]
    rows.append(f"ripple-pp,{expect(board).nodes[-1].node},20mV")
    path = tmp_path / "golden.csv"
    path.write_text("\n".join(rows) + "\n")
    out_path = tmp_path / "fitted.toml"
    summary = _json(
        ["calibrate", str(DICKSON), "--readings", str(path), "--out", str(out_path), "--json"]
    )
    assert summary["rms_residual_volts"] < board.meter_volts
    assert any("ripple-pp left out" in n for n in summary["notes"])


def test_calibrate_refuses_readings_from_a_failed_board(tmp_path):
    """Readings of a board with an open diode fit as a collapsed drive and a huge diode drop;
    calibrate must say so and write nothing, unless told to write it anyway."""
    board = load_profile(DC_LADDER)
    circuit, _ = build_circuit(board)
    open_d3 = next(f for h in catalog(board, circuit) if h.key == "D3:open" for f in h.faults())
    volts = {n.node: n.volts for n in expect(board, fault=open_d3).nodes}
    csv = _readings_csv(tmp_path, list(volts), volts)
    out_path = tmp_path / "fitted.toml"
    args = ["calibrate", str(DC_LADDER), "--readings", csv, "--out", str(out_path)]
    code, out, err = _run(args)
    assert code == 2 and out == "" and err.count("\n") == 1
    assert f"do not look like a healthy {board.name}" in err and "Nothing was written" in err
    assert "times the meter's accuracy there" in err
    assert not out_path.exists()
    # Even when told to accept it, a fit that would not load as a profile is not written.
    code, out, err = _run([*args, "--accept-poor-fit"])
    assert code == 2 and "the fitted profile: [diode.forward_volts]" in err
    assert "nothing was written" in err and not out_path.exists()


def test_calibrate_writes_a_poor_fit_only_when_told(tmp_path):
    csv = _golden_csv(tmp_path, DICKSON, 0.7)  # a drive 30 % low: not this board's profile
    out_path = tmp_path / "fitted.toml"
    args = ["calibrate", str(DICKSON), "--readings", csv, "--out", str(out_path)]
    code, _, err = _run(args)
    assert code == 2 and "the fit moves the drive from 3.3 V to 2.31 V" in err
    code, out, err = _run([*args, "--accept-poor-fit"])
    assert code == 0, err
    assert "POOR FIT (written because of --accept-poor-fit)" in out
    assert "POOR FIT, written with --accept-poor-fit" in out_path.read_text()
    assert load_profile(out_path).drive_volts == pytest.approx(3.3 * 0.7, rel=0.005)


def test_calibrate_takes_a_shipped_profile_by_name(tmp_path, monkeypatch):
    monkeypatch.setenv("FIELDTOOL_PROFILES", str(tmp_path / "none"))
    csv = _golden_csv(tmp_path, DICKSON, 0.98)
    out_path = tmp_path / "fitted.toml"
    code, out, err = _run(["calibrate", DICKSON.stem, "--readings", csv, "--out", str(out_path)])
    assert code == 0, err
    assert load_profile(out_path).drive_volts == pytest.approx(
        load_profile(DICKSON).drive_volts * 0.98, rel=0.005
    )


def test_calibrate_output_problems_are_one_line_before_any_work(tmp_path):
    csv = _golden_csv(tmp_path, DICKSON, 0.98)
    for out, words in (
        (tmp_path / "missing" / "f.toml", "does not exist"),
        (tmp_path, "is a folder"),
    ):
        code, _, err = _run(["calibrate", str(DICKSON), "--readings", csv, "--out", str(out)])
        assert code == 2 and words in err and err.count("\n") == 1
