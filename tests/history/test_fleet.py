"""The fleet view on real logs folders: counts, repeats, intervals, and a cache that stays right."""

from __future__ import annotations

import hashlib
import json

import pytest

from fieldtool.core import history as h
from fieldtool.core.history.fleet import confirmed_failures, fleet_view
from fieldtool.core.history.fleet_cache import CACHE_NAME
from fieldtool.core.history.merge import merge
from tests.history.helpers import day, session


def _read_cache(logs):
    """The cache's header and its files (the payload after the checksummed header line)."""
    head, _, payload = (logs / "cw6" / CACHE_NAME).read_bytes().partition(b"\n")
    return json.loads(head), json.loads(payload)


def _write_cache(logs, files, *, sha=None, fmt=2):
    """A cache file with a correct checksum unless ``sha`` is given."""
    payload = json.dumps(files).encode()
    header = {"format": fmt, "sha256": sha or hashlib.sha256(payload).hexdigest()}
    (logs / "cw6" / CACHE_NAME).write_bytes(json.dumps(header).encode() + b"\n" + payload + b"\n")


def _small_fleet(logs):
    session(logs, "SN1", day(0), "fixed", [("D5", "open")], verify=True)
    session(logs, "SN1", day(10), "fixed", [("D5", "open"), ("C4", "short")])
    session(logs, "SN1", day(40), "fixed", [("D5", "leaky")], verify=True)
    session(logs, "SN2", day(2), "fixed", [("D5", "open")])
    session(logs, "SN2", day(3), "not-fixed", [("C2", "short")])
    session(logs, "SN3", day(5), "escalated", [])
    session(logs, "SN3", day(6), None, [("D1", "open")])
    session(logs, "SN4", day(1), "fixed", [("D5", None)])  # no mode named
    session(logs, "OTHER", day(1), "fixed", [("D5", "open")], profile="cw4")


def test_confirmed_failures_by_designator_and_mode(tmp_path):
    _small_fleet(tmp_path)
    assert confirmed_failures(tmp_path, "cw6") == {
        ("D5", "open"): 3,
        ("C4", "short"): 1,
        ("D5", "leaky"): 1,
    }
    assert confirmed_failures(tmp_path, "cw4") == {("D5", "open"): 1}
    assert confirmed_failures(tmp_path, "never-seen") == {}


def test_fleet_view_counts(tmp_path):
    _small_fleet(tmp_path)
    view = fleet_view(tmp_path, "cw6")
    assert (view.boards, view.sessions, view.repairs) == (4, 8, 4)
    assert view.outcomes == {"fixed": 5, "not-fixed": 1, "escalated": 1, "open": 1}
    top = view.failures[0]
    assert (top.designator, top.mode, top.count, top.boards, top.verified) == (
        "D5",
        "open",
        3,
        2,
        1,
    )
    # SN1: repairs on days 0, 10 and 40 -> gaps of 10 and 30 days; no other board repaired twice
    assert view.intervals.count == 2
    assert view.intervals.median_days == pytest.approx(20.0)
    assert view.intervals.shortest_days == pytest.approx(10.0)
    (repeat,) = view.repeat_repairs
    assert (repeat.board, repeat.designator, repeat.modes) == (
        "SN1",
        "D5",
        ("open", "open", "leaky"),
    )
    assert repeat.shortest_days == pytest.approx(10.0)
    (recurring,) = view.recurring_boards
    assert (recurring.board, recurring.repairs) == ("SN1", 3)
    assert recurring.failures == (("C4", "short", 1), ("D5", "leaky", 1), ("D5", "open", 2))
    json.dumps(view.to_json())  # the --json shape is plain JSON


def test_a_board_type_with_no_history_is_an_empty_fleet_and_missing_logs_an_error(tmp_path):
    _small_fleet(tmp_path)
    empty = fleet_view(tmp_path, "nope")
    assert (empty.boards, empty.sessions, empty.repairs, empty.failures) == (0, 0, 0, ())
    with pytest.raises(h.NotFoundError, match="does not exist"):
        fleet_view(tmp_path / "missing", "cw6")
    with pytest.raises(h.BadNameError):
        fleet_view(tmp_path, "../cw6")


def _same(logs):
    with_cache = fleet_view(logs, "cw6")
    without = fleet_view(logs, "cw6", use_cache=False)
    assert with_cache == without
    return with_cache


def test_cache_is_written_and_gives_the_same_view(tmp_path):
    _small_fleet(tmp_path)
    first = _same(tmp_path)
    header, files = _read_cache(tmp_path)
    assert header["format"] == 2 and len(header["sha256"]) == 64
    assert sorted(files) == ["SN1.jsonl", "SN2.jsonl", "SN3.jsonl", "SN4.jsonl"]
    assert _same(tmp_path) == first


def test_cache_follows_appends_closes_and_new_boards(tmp_path):
    _small_fleet(tmp_path)
    _same(tmp_path)
    sid = session(tmp_path, "SN3", day(50), None, [("C4", "short")])
    assert _same(tmp_path).outcomes["open"] == 2
    h.append(tmp_path, "cw6", "SN3", h.SessionClosed(outcome="fixed"), time=day(51), session=sid)
    assert confirmed_failures(tmp_path, "cw6")[("C4", "short")] == 2
    session(tmp_path, "SN9", day(60), "fixed", [("C4", "short")])
    assert _same(tmp_path).boards == 5
    assert confirmed_failures(tmp_path, "cw6")[("C4", "short")] == 3


def test_cache_follows_a_merge_rewrite_and_a_merge_append(tmp_path):
    logs, laptop = tmp_path / "logs", tmp_path / "laptop"
    _small_fleet(logs)
    _same(logs)
    session(laptop, "SN2", day(1), "fixed", [("C2", "open")])  # earlier: merge rewrites SN2
    session(laptop, "SN4", day(90), "fixed", [("C2", "open")])  # later: merge appends to SN4
    merge(laptop, logs)
    view = _same(logs)
    assert next(f for f in view.failures if f.designator == "C2").count == 2


def test_cache_follows_a_torn_tail_and_the_record_after_it(tmp_path):
    _small_fleet(tmp_path)
    _same(tmp_path)
    with open(tmp_path / "cw6" / "SN4.jsonl", "ab") as f:
        f.write(b'{"schema":1,"id":"t","time":"2026-0')
    assert _same(tmp_path).damaged_lines == 1
    session(tmp_path, "SN4", day(70), "fixed", [("D2", "short")])
    view = _same(tmp_path)
    assert view.damaged_lines == 1 and ("D2", "short") in confirmed_failures(tmp_path, "cw6")


def test_cache_drops_deleted_boards(tmp_path):
    _small_fleet(tmp_path)
    _same(tmp_path)
    (tmp_path / "cw6" / "SN1.jsonl").unlink()
    assert _same(tmp_path).boards == 3
    assert "SN1.jsonl" not in _read_cache(tmp_path)[1]


@pytest.mark.parametrize(
    "damage",
    ["garbage", "truncated", "other-format", "bad-checksum", "bad-identity", "bad-summary"],
)
def test_damaged_or_foreign_cache_is_ignored_and_rebuilt(tmp_path, damage):
    _small_fleet(tmp_path)
    expected = fleet_view(tmp_path, "cw6", use_cache=False)
    fleet_view(tmp_path, "cw6")
    path = tmp_path / "cw6" / CACHE_NAME
    good = path.read_bytes()
    _, files = _read_cache(tmp_path)
    entry = files["SN1.jsonl"]
    if damage == "garbage":
        path.write_bytes(b"{not json")
    elif damage == "truncated":
        path.write_bytes(good[: len(good) // 2])
    elif damage == "other-format":
        _write_cache(tmp_path, files, fmt=999)
    elif damage == "bad-checksum":  # a flipped byte inside the payload
        files["SN1.jsonl"]["summary"]["repairs"] = []
        _write_cache(tmp_path, files, sha="0" * 64)
    elif damage == "bad-identity":
        entry["identity"] = "x"
        _write_cache(tmp_path, files)
    else:
        entry["summary"] = {"board": 1}
        _write_cache(tmp_path, files)
    assert fleet_view(tmp_path, "cw6") == expected
    assert _read_cache(tmp_path)[0]["format"] == 2


def test_the_cache_is_what_is_read_while_files_are_unchanged(tmp_path):
    """A summary whose identity still matches is used as is (so the cache really saves work)."""
    _small_fleet(tmp_path)
    _same(tmp_path)
    _, files = _read_cache(tmp_path)
    files["SN1.jsonl"]["summary"]["repairs"] = []  # a lie, for the same bytes on disk
    _write_cache(tmp_path, files)
    assert fleet_view(tmp_path, "cw6").recurring_boards == ()
    assert len(fleet_view(tmp_path, "cw6", use_cache=False).recurring_boards) == 1


def test_a_cache_entry_for_other_bytes_is_not_believed(tmp_path):
    """An entry whose identity no longer matches the file is recomputed, never used."""
    _small_fleet(tmp_path)
    _same(tmp_path)
    _, files = _read_cache(tmp_path)
    files["SN1.jsonl"]["summary"]["repairs"] = []  # a lie ...
    files["SN1.jsonl"]["identity"][2] -= 1  # ... recorded for a different size
    _write_cache(tmp_path, files)
    assert len(fleet_view(tmp_path, "cw6").recurring_boards) == 1


def test_fleet_view_works_on_a_read_only_folder_without_a_cache(tmp_path, read_only_dir):
    logs = tmp_path / "logs"
    _small_fleet(logs)
    expected = fleet_view(logs, "cw6", use_cache=False)
    read_only_dir(logs / "cw6")
    assert fleet_view(logs, "cw6") == expected
    assert not (logs / "cw6" / CACHE_NAME).exists()


def test_damaged_lines_do_not_hide_the_rest(tmp_path):
    session(tmp_path, "SN1", day(0), "fixed", [("D5", "open")])
    with open(tmp_path / "cw6" / "SN1.jsonl", "ab") as f:
        f.write(b'\xff\xfe\n{"schema":1,"kind":"action"}\n')
    session(tmp_path, "SN1", day(5), "fixed", [("D5", "open")])
    view = fleet_view(tmp_path, "cw6")
    assert view.damaged_lines == 2 and view.failures[0].count == 2


def test_kind_markers_inside_text_do_not_fool_the_fast_path(tmp_path):
    sid = session(tmp_path, "SN1", day(0), None, [])
    note = 'tech wrote "kind":"reading" in a note'
    h.append(
        tmp_path,
        "cw6",
        "SN1",
        h.Action(designator="D5", done="replaced", mode="open", note=note),
        time=day(0.5),
        session=sid,
    )
    h.append(tmp_path, "cw6", "SN1", h.SessionClosed(outcome="fixed"), time=day(1), session=sid)
    assert confirmed_failures(tmp_path, "cw6") == {("D5", "open"): 1}


def test_summaries_read_by_worker_processes_match_one_process(tmp_path, monkeypatch):
    import fieldtool.core.history.fleet_cache as fc

    _small_fleet(tmp_path)
    one = fleet_view(tmp_path, "cw6", use_cache=False)
    monkeypatch.setattr(fc, "PARALLEL_FILES", 2)  # four files: use the worker pool
    assert fleet_view(tmp_path, "cw6", use_cache=False) == one
    assert fleet_view(tmp_path, "cw6") == one  # the cache written from the workers' results
    assert fleet_view(tmp_path, "cw6") == one
