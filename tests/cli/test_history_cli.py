"""`fieldtool history`, `logs merge` and `fleet` on real folders: shapes and errors."""

from __future__ import annotations

import json

import pytest

from fieldtool.cli import main
from fieldtool.core import history as h
from tests.history.helpers import day, session

PROFILE = "datalogger-eeprom-dickson"


@pytest.fixture
def logs(tmp_path):
    folder = tmp_path / "logs"
    session(folder, "DL-0007", day(0), "fixed", [("D3", "open")], profile=PROFILE, verify=True)
    session(folder, "DL-0007", day(20), "fixed", [("D3", "open")], profile=PROFILE)
    session(folder, "DL-0008", day(2), None, [("C2", None)], profile=PROFILE)
    return folder


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _one_line_error(err: str) -> str:
    assert err.startswith("fieldtool: ") and err.count("\n") == 1, err
    assert "Traceback" not in err
    return err


def test_history_text_timeline(logs, capsys):
    code, out, _ = _run(capsys, "history", "DL-0007", "--logs", str(logs))
    assert code == 0
    assert out.startswith("Board DL-0007: 2 sessions, 11 records")
    assert out.count("Session 2026-") == 2 and "confirmed failure: D3 open (verified)" in out
    assert "action: D3 replaced (open)" in out


def test_history_json_shape(logs, capsys):
    code, out, _ = _run(capsys, "history", "DL-0007", "--logs", str(logs), "--json")
    data = json.loads(out)
    assert code == 0 and data["board"] == "DL-0007" and data["damaged"] == []
    assert len(data["events"]) == 11
    for event in data["events"]:
        assert {"id", "time", "kind", "schema", "session"} <= set(event)
    assert [e["kind"] for e in data["events"][:2]] == ["session-opened", "reading"]
    assert [s["outcome"] for s in data["sessions"]] == ["fixed", "fixed"]
    assert data["sessions"][0]["confirmed"][0]["designator"] == "D3"


def test_history_lists_damaged_lines_and_conflicts(logs, capsys):
    path = logs / PROFILE / "DL-0008.jsonl"
    rec = json.loads(path.read_text().splitlines()[1])
    with open(path, "a") as f:
        f.write(json.dumps({**rec, "volts": 99.0}) + "\n")  # same id, other content
        f.write('{"schema":1,"id":"torn')
    code, out, _ = _run(capsys, "history", "DL-0008", "--logs", str(logs), "--json")
    data = json.loads(out)
    assert data["conflicts"] == [rec["id"]]
    assert [d["reason"] for d in data["damaged"]] == ["torn last line (no newline)"]
    code, out, _ = _run(capsys, "history", "DL-0008", "--logs", str(logs))
    assert "Damaged lines" in out and "stored twice with different content" in out


def test_history_reads_the_environment_variable(logs, capsys, monkeypatch):
    monkeypatch.setenv("FIELDTOOL_LOGS", str(logs))
    code, out, _ = _run(capsys, "history", "DL-0008")
    assert code == 0 and "Board DL-0008" in out


def test_history_neutralises_terminal_escapes_from_the_file(logs, capsys):
    sid = session(logs, "DL-0009", day(1), None, [], profile=PROFILE)
    note = "\x1b]0;owned\x07\x1b[2J wiped"
    h.append(logs, PROFILE, "DL-0009", h.Action("C1", "cleaned", note=note), session=sid)
    code, out, _ = _run(capsys, "history", "DL-0009", "--logs", str(logs))
    assert code == 0 and "\x1b" not in out and "\x07" not in out and "\\x1b[2J wiped" in out


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["history", "DL-0070"], "no history for board 'DL-0070'"),
        (["history", "../etc"], "contains a path separator"),
        (["history", "DL-0007", "--logs", "{missing}"], "does not exist"),
        (["history", "DL-0007", "--logs", "{file}"], "is not a folder"),
        (["fleet", "no-such-board"], "no profile named 'no-such-board' and no histories for it"),
        (["history", "TG:42"], "no history for board 'TG:42'"),
        (["fleet", PROFILE, "--logs", "{missing}"], "does not exist"),
        (["logs"], "needs a subcommand: merge"),
        (["logs", "merge", "{missing}"], "not a folder"),
        (["logs", "merge", "{logs}"], "into itself"),
        (["logs", "merge", "{logs}", "--logs", "{file}"], "is a file"),
    ],
)
def test_errors_are_one_line_with_exit_code_2(logs, capsys, argv, words):
    file = logs.parent / "plain-file"
    file.write_text("x")
    names = {"missing": logs.parent / "nowhere", "file": file, "logs": logs}
    argv = [a.format(**names) for a in argv]
    if "--logs" not in argv and argv[0] != "logs":
        argv += ["--logs", str(logs)]
    if argv[:2] == ["logs", "merge"] and "--logs" not in argv:
        argv += ["--logs", str(logs)]
    code, out, err = _run(capsys, *argv)
    assert code == 2 and out == ""
    assert words in _one_line_error(err)


def test_fleet_of_a_known_board_type_with_no_history_is_empty(logs, capsys):
    code, out, err = _run(capsys, "fleet", "tidegauge-apd-bias", "--logs", str(logs))
    assert code == 0 and err == ""
    assert out.startswith("Fleet tidegauge-apd-bias: 0 boards, 0 sessions (none), 0 repairs")
    code, out, _ = _run(capsys, "fleet", "tidegauge-apd-bias", "--logs", str(logs), "--json")
    assert json.loads(out)["boards"] == 0


def test_unknown_serial_suggests_close_ones(logs, capsys):
    code, _, err = _run(capsys, "history", "DL-007", "--logs", str(logs))
    assert code == 2 and "did you mean DL-0007" in _one_line_error(err)


def test_logs_merge_reports_and_is_idempotent(logs, tmp_path, capsys):
    shop = tmp_path / "shop"
    code, out, _ = _run(capsys, "logs", "merge", str(logs), "--logs", str(shop))
    assert code == 0 and "15 new records on 2 boards, 0 already present" in out
    code, out, _ = _run(capsys, "logs", "merge", str(logs), "--logs", str(shop), "--json")
    data = json.loads(out)
    assert (data["added"], data["already_present"], data["conflicts"]) == (0, 15, [])


def test_logs_merge_prints_conflicts_and_damaged_source_lines(logs, tmp_path, capsys):
    shop = tmp_path / "shop"
    main(["logs", "merge", str(logs), "--logs", str(shop)])
    capsys.readouterr()
    path = logs / PROFILE / "DL-0008.jsonl"
    lines = path.read_text().splitlines()
    changed = {**json.loads(lines[1]), "volts": 42.0}
    path.write_text("\n".join([lines[0], json.dumps(changed), *lines[2:]]) + "\n{broken\n")
    code, out, _ = _run(capsys, "logs", "merge", str(logs), "--logs", str(shop))
    assert code == 0 and "1 conflict:" in out and changed["id"] in out
    assert "1 damaged line in the source, not merged" in out


def test_fleet_text_and_json(logs, capsys):
    code, out, _ = _run(capsys, "fleet", PROFILE, "--logs", str(logs))
    assert code == 0
    assert out.startswith(f"Fleet {PROFILE}: 2 boards, 3 sessions (2 fixed, 1 open), 2 repairs")
    assert "DL-0007: D3 ×2" in out and "median 20.0 days" in out
    code, out, _ = _run(capsys, "fleet", PROFILE, "--logs", str(logs), "--json")
    data = json.loads(out)
    assert data["confirmed_failures"] == [
        {"designator": "D3", "mode": "open", "count": 2, "boards": 1, "verified": 1}
    ]
    assert data["recurring_boards"][0]["board"] == "DL-0007"
    assert data["time_between_repairs"]["median_days"] == pytest.approx(20.0)


def test_fleet_accepts_the_profile_file(logs, capsys):
    from tests.conftest import ROOT

    toml = ROOT / "fieldtool" / "profiles" / f"{PROFILE}.toml"
    code, out, _ = _run(capsys, "fleet", str(toml), "--logs", str(logs), "--json")
    assert code == 0 and json.loads(out)["boards"] == 2
