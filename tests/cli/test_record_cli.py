"""`fieldtool record`: a whole session from a readings file, and fleet counts feeding priors."""

from __future__ import annotations

import json

import pytest

from fieldtool.cli import main
from fieldtool.commands.history_record import parse_action
from fieldtool.core import history as h
from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.faults import Fault
from fieldtool.core.diagnosis.priors import fleet_priors, published_priors
from fieldtool.core.errors import InputError
from fieldtool.core.history.fleet import confirmed_failures
from fieldtool.core.measurement import Source
from fieldtool.core.readings import readings_csv
from fieldtool.core.session import unfinished_session
from tests.conftest import ROOT
from tests.readings import dc

PROFILE_PATH = ROOT / "fieldtool" / "profiles" / "datalogger-eeprom-dickson.toml"


@pytest.fixture(autouse=True)
def _engine_cache(tmp_path_factory, monkeypatch):
    """Keep the fault-dictionary cache of this test run out of the user's cache folder."""
    monkeypatch.setenv("FIELDTOOL_CACHE", str(tmp_path_factory.getbasetemp() / "dictionary"))


@pytest.fixture(scope="module")
def profile():
    return load_profile(PROFILE_PATH)


@pytest.fixture(scope="module")
def d3_open_csv(profile, tmp_path_factory):
    """What a meter reads on this board with D3 open (the solver's as-read values)."""
    e = expect(profile, fault=Fault("D3", "open"))
    path = tmp_path_factory.mktemp("readings") / "d3-open.csv"
    path.write_text(readings_csv(dc(n.node, round(n.volts, 3)) for n in e.nodes))
    return path


@pytest.fixture(scope="module")
def healthy_csv(profile, tmp_path_factory):
    e = expect(profile)
    path = tmp_path_factory.mktemp("readings") / "healthy.csv"
    path.write_text(readings_csv(dc(n.node, round(n.volts, 3)) for n in e.nodes))
    return path


def _record(capsys, logs, *extra):
    code = main(["record", str(PROFILE_PATH), "--logs", str(logs), *extra])
    out, err = capsys.readouterr()
    return code, out, err


def test_record_logs_a_whole_session(tmp_path, capsys, d3_open_csv, healthy_csv):
    logs = tmp_path / "logs"
    code, out, _ = _record(
        capsys,
        logs,
        *("--board", "DL-0100", "--readings", str(d3_open_csv), "--verify", str(healthy_csv)),
        *("--action", "D3:open replaced", "--part", "BAT54 from stock", "--note", "cracked"),
        *("--outcome", "fixed", "--technician", "ana", "--json"),
    )
    data = json.loads(out)
    assert code == 0 and data["board"] == "DL-0100" and data["outcome"] == "fixed"
    assert data["priors"] == "published"
    top = data["diagnosis"]["suspects"][0]
    assert (top["component"], top["mode"]) == ("D3", "open")  # the engine finds the fault
    history = h.read_board(logs, "DL-0100")
    kinds = [r.kind for r in history.events]
    # the same records the terminal UI writes: the diagnosis that led to the repair, and the
    # one the verification readings give, saved with the outcome
    assert kinds == ["session-opened"] + ["reading"] * 6 + ["diagnosis", "action"] + [
        "verification"
    ] * 6 + ["diagnosis", "session-closed"]
    assert {r.session for r in history.events} == {data["session"]}
    readings = [r.event.measurement for r in history.events if r.kind == "reading"]
    assert {m.source for m in readings} == {Source("file", d3_open_csv.name)}
    assert all(m.settled for m in readings)
    action = history.events[8].event
    assert action == h.Action("D3", "replaced", "open", "BAT54 from stock", "cracked")
    assert history.events[0].fields["profile_hash"] == load_profile(PROFILE_PATH).digest
    assert confirmed_failures(logs, "datalogger-eeprom-dickson") == {("D3", "open"): 1}


def test_record_text_output_and_a_session_left_open(tmp_path, capsys, d3_open_csv):
    logs = tmp_path / "logs"
    code, out, _ = _record(capsys, logs, "--board", "DL-0101", "--readings", str(d3_open_csv))
    assert code == 0 and "outcome none (session left open)" in out
    assert "D3 open" in out and "published priors" in out
    assert unfinished_session(logs, "DL-0101") is not None
    kinds = [r.kind for r in h.read_board(logs, "DL-0101").events]
    assert kinds == ["session-opened"] + ["reading"] * 6 + ["diagnosis"]  # what it thought


def test_fleet_counts_change_diagnosis_priors(tmp_path, capsys, profile, d3_open_csv):
    """Confirmed D3 failures on several boards raise D3's prior above the published one."""
    logs = tmp_path / "logs"
    for board in ("DL-1", "DL-2", "DL-3", "DL-4"):
        code, _, _ = _record(
            capsys,
            logs,
            *("--board", board, "--readings", str(d3_open_csv)),
            *("--action", "replaced D3:open", "--outcome", "fixed"),
        )
        assert code == 0
    confirmed = confirmed_failures(logs, profile.name)
    assert confirmed == {("D3", "open"): 4}
    hyps = load_or_build(profile).hypotheses
    published, fleet = published_priors(profile, hyps), fleet_priors(profile, hyps, confirmed)
    assert fleet.of("D3:open") > 2 * published.of("D3:open")
    assert fleet.of("C1:short") < published.of("C1:short")  # the rest make room
    assert fleet.source[fleet.keys.index("D3:open")].startswith("fleet: 4 confirmed")
    # the next session on this board type is diagnosed with those priors, and says so
    code, out, _ = _record(
        capsys, logs, "--board", "DL-5", "--readings", str(d3_open_csv), "--json"
    )
    data = json.loads(out)
    d3 = next(
        s for s in data["diagnosis"]["suspects"] if s["component"] == "D3" and s["mode"] == "open"
    )
    assert data["priors"] == "fleet" and d3["prior_source"].startswith("fleet: 4 confirmed")
    assert d3["prior"] == pytest.approx(fleet.of("D3:open"), rel=1e-3)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("D3:open replaced", ("D3", "open", "replaced")),
        ("replaced D3:open", ("D3", "open", "replaced")),
        ("d3:OPEN swapped for a new one", ("D3", "open", "swapped for a new one")),
        ("C2:lowcap=0.3 replaced", ("C2", "lowcap", "replaced")),
        ("D3 reflowed", ("D3", None, "reflowed")),
        ("D3:open", ("D3", "open", "replaced")),
        (
            "drive:stuck-low reseated the clock buffer",
            ("drive", "stuck-low", "reseated the clock buffer"),
        ),
    ],
)
def test_action_phrases(profile, text, expected):
    a = parse_action(text, profile)
    assert (a.designator, a.mode, a.done) == expected


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("replaced it", "names no part on this board"),
        ("D3:open C2:short", "names more than one part"),
        ("D3:exploded replaced", "has no fault mode 'exploded'"),
        ("D9:open replaced", "names no part"),
        ("D3: replaced", "nothing after ':'"),
        ("C2:lowcap replaced", "needs a severity"),
    ],
)
def test_action_phrases_that_are_refused(profile, text, words):
    with pytest.raises(InputError, match=words):
        parse_action(text, profile)


def test_renamed_designators_are_stored_as_the_board_shows_them(tmp_path, capsys, d3_open_csv):
    renamed = tmp_path / "datalogger-eeprom-dickson.toml"
    renamed.write_text(PROFILE_PATH.read_text() + '\n[designators]\nD3 = "CR3"\n')
    logs = tmp_path / "logs"
    code = main(
        ["record", str(renamed), "--logs", str(logs), "--board", "DL-9"]
        + ["--readings", str(d3_open_csv), "--action", "cr3:open replaced", "--outcome", "fixed"]
    )
    capsys.readouterr()
    assert code == 0
    assert confirmed_failures(logs, "datalogger-eeprom-dickson") == {("CR3", "open"): 1}


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (["--board", "../x"], "contains a path separator"),
        (["--board", "DL-1", "--action", "nothing"], "names no part"),
        (["--board", "DL-1", "--action", "D3 a", "--action", "C2 b", "--part", "x"], "exactly one"),
        (["--board", "DL-1", "--readings", "{missing}"], "readings file not found"),
        (["--board", "DL-1", "--readings", "{bad}"], "is not on this board"),
        (["--board", "DL-1", "--logs", "{file}"], "is not a folder"),
        (["--board", "DL-1", "--verify", "{bad}"], "--verify takes readings after a repair"),
        (["--board", "DL-1", "--readings", "{huge}"], "S0 DC volts 1e+300 V is beyond what any"),
        (["--board", "DL:1"], "contains ':'"),
        (["--board", "NUL"], "a name Windows reserves for a device"),
    ],
)
def test_record_errors_write_nothing(tmp_path, capsys, d3_open_csv, extra, words):
    logs = tmp_path / "logs"
    bad = tmp_path / "bad.csv"
    bad.write_text("node,volts\nS0,3.3\nZ9,1.0\n")
    file = tmp_path / "plain-file"
    file.write_text("x")
    huge = tmp_path / "huge.csv"
    huge.write_text("node,volts\nS0,1e300\nOUT,14.2\n")
    names = {"missing": tmp_path / "none.csv", "bad": bad, "file": file, "huge": huge}
    argv = [e.format(**names) for e in extra]
    if "--readings" not in argv:
        argv += ["--readings", str(d3_open_csv)]
    code = main(["record", str(PROFILE_PATH), "--logs", str(logs), *argv])
    out, err = capsys.readouterr()
    assert code == 2 and out == "" and err.count("\n") == 1 and words in err
    assert not logs.exists() and file.read_text() == "x"


def test_record_refuses_an_unknown_outcome(tmp_path, capsys, d3_open_csv):
    argv = ["record", str(PROFILE_PATH), "--logs", str(tmp_path / "logs"), "--board", "DL-1"]
    with pytest.raises(SystemExit) as stop:
        main([*argv, "--readings", str(d3_open_csv), "--outcome", "sort-of"])
    assert stop.value.code == 2 and "invalid choice: 'sort-of'" in capsys.readouterr().err
    assert not (tmp_path / "logs").exists()


def test_record_takes_long_form_readings_and_shows_the_next_measurement(capsys, tmp_path, profile):
    e = expect(profile, fault=Fault("D3", "open"))
    rows = ["measure,at,value"] + [f"dc,{n.node},{n.volts * 1e3:.1f}mV" for n in e.nodes[:3]]
    rows += ["current,supply,2.1mA", "diode-test,D3,OL"]  # every kind goes into the session
    path = tmp_path / "long.csv"
    path.write_text("\n".join(rows) + "\n")
    code, out, err = _record(capsys, tmp_path / "logs", "--board", "L-1", "--readings", str(path))
    assert code == 0, err
    assert "5 readings" in out
    assert "next: " in out
    logged = h.read_board(tmp_path / "logs", "L-1").events
    kinds = {r.event.measurement.quantity.name for r in logged if isinstance(r.event, h.Reading)}
    assert kinds == {"dc", "current", "diode-test"}
    code, out, err = _record(
        capsys, tmp_path / "logs", "--board", "L-2", "--readings", str(path), "--json"
    )
    diagnosis = json.loads(out)["diagnosis"]
    nxt = diagnosis["next_measurement"]
    assert nxt is None or nxt["quantity"] in {
        "dc",
        "ripple-pp",
        "ac-rms",
        "current",
        "dc-loaded",
        "diode-test",
    }
    assert {w["quantity"] for w in diagnosis["worth"]} <= {
        "dc",
        "ripple-pp",
        "ac-rms",
        "current",
        "dc-loaded",
        "diode-test",
    }
