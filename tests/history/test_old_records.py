"""Records written before readings carried a whole measurement (schema 1) still load and show.

``data/schema1-TG-0007.jsonl`` holds lines exactly as the previous version of the tool wrote
them: a closed session with typed, meter, unsettled ("BENCH,... (unsettled)"), overloaded and
file readings (one with a ripple), diagnoses naming the healthy board "board", a repair and a
verification; then a session left open. ``data/schema1-TG-0007.history.txt`` and
``.timeline.txt`` are what that version printed for ``fieldtool history TG-0007`` and showed
in the terminal UI's timeline: this version must show the same.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from fieldtool.cli import main
from fieldtool.core import history as h
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.history.fleet import confirmed_failures, fleet_view
from fieldtool.core.history.merge import merge
from fieldtool.core.history.sessions import group_sessions
from fieldtool.core.measurement import DC, Source
from fieldtool.core.report.content import build_report, expectations_for
from fieldtool.core.session import BoardSession, unfinished_session
from fieldtool.tui.history import event_words
from tests.conftest import ROOT
from tests.readings import reading

DATA = Path(__file__).parent / "data"
PROFILE = "tidegauge-apd-bias"
BENCH = Source("meter", "BENCH,DMM-9,0042,1.0")


@pytest.fixture
def logs(tmp_path):
    """A logs folder holding the old board file as it was written."""
    folder = tmp_path / "logs" / PROFILE
    folder.mkdir(parents=True)
    shutil.copy(DATA / "schema1-TG-0007.jsonl", folder / "TG-0007.jsonl")
    return tmp_path / "logs"


@pytest.fixture(scope="module")
def profile():
    return load_profile(ROOT / "fieldtool" / "profiles" / f"{PROFILE}.toml")


def test_every_old_line_is_a_readable_record(logs):
    history = h.read_board(logs, "TG-0007")
    assert history.damaged == () and len(history.events) == 15
    assert all(r.schema == 1 and not r.newer_schema for r in history.events)
    assert all(r.event is not None for r in history.events)


def test_old_readings_become_measurements(logs):
    events = [r.event for r in h.read_board(logs, "TG-0007").events]
    taken = [e.measurement for e in events if isinstance(e, h.Reading)]
    assert [(m.at, m.value, m.source, m.settled) for m in taken] == [
        ("S0", 15.02, Source("typed"), True),
        ("S4", 61.7, BENCH, True),
        ("S6", 88.1, BENCH, False),  # " (unsettled)" came off the source into the flag
        ("S8", None, BENCH, True),  # overload
        ("S2", 38.5, Source("file", "bench.csv"), True),
        ("S8", 125.6, BENCH, True),  # the verification
        ("S0", 15.0, Source("typed"), True),
        ("S4", 70.2, BENCH, False),
        ("S8", 96.3, BENCH, True),
    ]
    assert {m.quantity for m in taken} == {DC}
    assert [m.spread for m in taken[1:4]] == [0.004, 0.9, None]
    snapshot = next(e for e in events if isinstance(e, h.DiagnosisSnapshot))
    assert snapshot.suspects[1] == h.SnapshotSuspect("board", "healthy", 0.05)


def test_history_command_prints_what_the_old_version_printed(logs, capsys):
    assert main(["history", "TG-0007", "--logs", str(logs)]) == 0
    expected = (DATA / "schema1-TG-0007.history.txt").read_text()
    assert capsys.readouterr().out == expected


def test_history_json_keeps_the_old_fields(logs, capsys):
    assert main(["history", "TG-0007", "--logs", str(logs), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    ripple = [e for e in data["events"] if e.get("ripple_vpp") is not None]
    assert len(ripple) == 1 and ripple[0]["ripple_vpp"] == 0.031 and ripple[0]["schema"] == 1


def test_the_ui_timeline_shows_what_the_old_version_showed(logs):
    words = [event_words(r) for r in h.read_board(logs, "TG-0007").events]
    assert words == (DATA / "schema1-TG-0007.timeline.txt").read_text().splitlines()


def test_report_rows_from_old_readings(logs, profile):
    history = h.read_board(logs, "TG-0007")
    sessions = group_sessions(history.events)
    report = build_report(history, sessions, PROFILE, expectations_for(profile))
    closed, still_open = report.sessions
    rows = {r.node: (r.volts, r.status) for r in closed.readings}
    assert rows["S0"] == (15.02, "in band") and rows["S8"] == (None, "over range")
    assert rows["S4"][1] == "low" and set(rows) == {"S0", "S2", "S4", "S6", "S8"}
    assert [(r.node, r.volts, r.status) for r in closed.verifications] == [("S8", 125.6, "in band")]
    assert closed.suspects == (("board", "healthy", 0.93),)
    assert [r.node for r in still_open.readings] == ["S0", "S4", "S8"]


def test_fleet_counts_old_repairs(logs, capsys):
    assert confirmed_failures(logs, PROFILE) == {("C6", "short"): 1}
    assert main(["fleet", PROFILE, "--logs", str(logs)]) == 0
    first = capsys.readouterr().out.splitlines()[0]
    assert first == f"Fleet {PROFILE}: 1 board, 2 sessions (1 fixed, 1 open), 1 repair"
    view = fleet_view(logs, PROFILE, use_cache=False)
    assert (view.sessions, view.repairs) == (2, 1)
    assert view.failures[0].verified == 1  # the old verification record still counts


def test_merge_keeps_old_lines_byte_for_byte_beside_new_ones(logs, tmp_path):
    shop = tmp_path / "shop"
    h.append(shop, PROFILE, "TG-0007", reading("S3", 55.0), session="new-session")
    report = merge(logs, shop)
    assert (report.added, report.conflicts, report.damaged) == (15, (), ())
    merged = (shop / PROFILE / "TG-0007.jsonl").read_text().splitlines()
    old = (DATA / "schema1-TG-0007.jsonl").read_text().splitlines()
    assert set(old) <= set(merged) and len(merged) == len(old) + 1
    schemas = [r.schema for r in h.read_board(shop, "TG-0007").events]
    assert schemas.count(1) == 15 and schemas.count(2) == 1


def test_an_old_open_session_resumes(logs, profile, dictionary_cache):
    from fieldtool.core.diagnosis.dictionary_cache import load_or_build

    unfinished = unfinished_session(logs, "TG-0007")
    assert unfinished is not None and unfinished.id == "old-open-2"
    saved = []
    session = BoardSession(
        profile,
        "TG-0007",
        load_or_build(profile, cache_dir=dictionary_cache),
        lambda event, sid: saved.append((event, sid)),
    )
    assert session.resume(unfinished) == 3
    assert session.volts_by_node() == {"S0": 15.0, "S4": 70.2, "S8": 96.3}
    assert session.latest("S4").settled is False
    session.take(reading("S6", 99.0).measurement)
    assert saved == [(reading("S6", 99.0), "old-open-2")]  # new records join the old session
