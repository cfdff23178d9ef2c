"""Session ids on records, grouping (new and old records), append_many, what 'confirmed' means."""

from __future__ import annotations

import json
import multiprocessing
import os

import pytest

from fieldtool.core import history as h
from fieldtool.core.history.sessions import confirmed_in, group_sessions, is_catalogued
from tests.history.helpers import day, session
from tests.readings import reading


def _sessions(logs, serial="SN1"):
    return group_sessions(h.read_board(logs, serial).events)


def test_every_record_of_a_session_carries_its_id(tmp_path):
    sid = session(tmp_path, "SN1", day(0), "fixed", [("D5", "open")])
    lines = (tmp_path / "cw6" / "SN1.jsonl").read_text().splitlines()
    assert [json.loads(line)["session"] for line in lines] == [sid] * len(lines)


def test_two_terminals_interleaving_on_one_board_stay_apart(tmp_path):
    a = h.SessionOpened(technician="ana", profile_hash="x", tool_version="0.1.0")
    b = h.SessionOpened(technician="bo", profile_hash="x", tool_version="0.1.0")
    writes = [
        (a, None),
        (b, None),
        (h.Action(designator="D5", done="replaced", mode="open"), a),
        (h.Action(designator="C2", done="replaced", mode="short"), b),
        (h.SessionClosed(outcome="not-fixed"), b),
        (h.SessionClosed(outcome="fixed"), a),
    ]
    for i, (event, owner) in enumerate(writes):
        sid = owner.session_id if owner else None
        h.append(tmp_path, "cw6", "SN1", event, time=day(i / 100), session=sid)
    sessions = _sessions(tmp_path)
    by_id = {s.id: s for s in sessions}
    assert by_id[a.session_id].outcome == "fixed" and by_id[b.session_id].outcome == "not-fixed"
    assert [(f.designator, f.mode) for f in confirmed_in(by_id[a.session_id])] == [("D5", "open")]
    assert confirmed_in(by_id[b.session_id]) == ()


def test_records_without_a_session_id_still_read_and_group_by_position(tmp_path):
    old = session(tmp_path, "SN1", day(0), "fixed", [("D5", "open")], legacy=True)
    new = session(tmp_path, "SN1", day(3), "escalated", [("C4", "short")])
    raw = (tmp_path / "cw6" / "SN1.jsonl").read_text().splitlines()
    assert sum('"session"' in line for line in raw) == 5  # only the new session's records
    history = h.read_board(tmp_path, "SN1")
    assert history.damaged == () and len(history.events) == 10
    sessions = group_sessions(history.events)
    assert [(s.id, s.outcome, len(s.records)) for s in sessions] == [
        (old, "fixed", 5),
        (new, "escalated", 5),
    ]
    assert [f.designator for f in confirmed_in(sessions[0])] == ["D5"]


def test_a_legacy_record_after_its_close_is_a_stray_not_part_of_a_session(tmp_path):
    session(tmp_path, "SN1", day(0), "fixed", [("D5", "open")], legacy=True)
    stray = {"schema": 1, "id": "z" * 32, "time": "2026-02-01T00:00:00Z", "kind": "reading"}
    with (tmp_path / "cw6" / "SN1.jsonl").open("a") as f:
        f.write(json.dumps(stray | {"node": "S1", "volts": 1.0}) + "\n")
    sessions = _sessions(tmp_path)
    assert [s.id is None for s in sessions] == [True, False]
    assert len(sessions[0].records) == 1


def test_session_field_of_an_unknown_shape_is_kept_not_trusted():
    rec = h.parse_record('{"schema":1,"id":"a","time":"t","kind":"reading","session":{"x":1}}')
    assert rec.session is None and rec.fields["session"] == {"x": 1}
    assert rec.to_dict()["session"] == {"x": 1}


def test_append_many_is_one_ordered_write_with_one_session(tmp_path):
    opened = h.SessionOpened(technician="ana", profile_hash="x", tool_version="0.1.0")
    events = [opened, reading("S1", 1.0), h.SessionClosed(outcome="fixed")]
    records = h.append_many(tmp_path, "cw6", "SN1", events, time=day(0))
    assert {r.session for r in records} == {opened.session_id}
    assert [r.time for r in records] == sorted({r.time for r in records})
    assert [r.event for r in h.read_board(tmp_path, "SN1").events] == events


def test_append_many_to_a_full_disk_writes_nothing(tmp_path):
    if not os.path.exists("/dev/full"):
        pytest.skip("/dev/full is not available on this system")
    (tmp_path / "cw6").mkdir()
    (tmp_path / "cw6" / "SN1.jsonl").symlink_to("/dev/full")
    events = [reading("S1", 1.0), reading("S2", 2.0)]
    with pytest.raises(h.SaveError, match="could not save 2 records .*disk full.*kept in memory"):
        h.append_many(tmp_path, "cw6", "SN1", events)


@pytest.mark.parametrize(
    ("designator", "mode", "expected"),
    [
        ("D5", "open", True),
        ("C4", "lowcap", True),
        ("CR105", "weak", True),  # a renamed diode: any part mode is catalogued
        ("drive", "stuck-low", True),
        ("supply", "low", True),
        ("drive", "open", False),
        ("D5", "exploded", False),
        ("D5", "", False),
    ],
)
def test_catalogued_modes(designator, mode, expected):
    assert is_catalogued(designator, mode) is expected


@pytest.mark.parametrize(
    ("outcome", "actions", "confirmed"),
    [
        ("fixed", [("D5", "open")], [("D5", "open")]),
        ("not-fixed", [("D5", "open")], []),
        ("escalated", [("D5", "open")], []),
        (None, [("D5", "open")], []),  # still open
        ("fixed", [("D5", None)], []),  # no mode named: nothing confirmed
        ("fixed", [("D5", "exploded")], []),
        (
            "fixed",
            [("D5", "open"), ("D5", "open"), ("C2", "short")],
            [("D5", "open"), ("C2", "short")],
        ),
    ],
)
def test_what_a_session_confirms(tmp_path, outcome, actions, confirmed):
    session(tmp_path, "SN1", day(0), outcome, actions)
    (only,) = _sessions(tmp_path)
    assert [(f.designator, f.mode) for f in confirmed_in(only)] == confirmed


def test_verified_needs_a_verification_after_the_action(tmp_path):
    session(tmp_path, "SN1", day(0), "fixed", [("D5", "open")], verify=True)
    session(tmp_path, "SN2", day(0), "fixed", [("D5", "open")], verify=False)
    assert [f.verified for f in confirmed_in(_sessions(tmp_path, "SN1")[0])] == [True]
    assert [f.verified for f in confirmed_in(_sessions(tmp_path, "SN2")[0])] == [False]


def _terminal(args):
    logs, who, count = args
    for i in range(count):
        session(logs, "SHARED", day(i), "fixed", [(f"D{who}", "open")])


def test_concurrent_terminals_writing_whole_sessions_keep_them_apart(tmp_path):
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(3) as pool:
        pool.map(_terminal, [(tmp_path, who, 5) for who in (1, 2, 3)])
    sessions = _sessions(tmp_path, "SHARED")
    assert len(sessions) == 15
    for s in sessions:
        assert s.outcome == "fixed" and len(s.records) == 5
        (found,) = confirmed_in(s)
        assert found.designator == s.records[3].fields["designator"]
