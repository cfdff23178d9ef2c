"""Merging logs folders on real files: union by id, idempotent, ordered, nothing lost."""

from __future__ import annotations

import json
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from fieldtool.core import history as h
from fieldtool.core.history.merge import merge
from tests.readings import reading

T0 = datetime(2026, 3, 1, 8, 0, tzinfo=UTC)


def _at(hours: float) -> datetime:
    return T0 + timedelta(hours=hours)


def _reading(logs: Path, serial: str, hours: float, volts: float, profile: str = "cw6") -> str:
    return h.append(logs, profile, serial, reading("S1", volts), time=_at(hours)).id


def _lines(path: Path) -> list[bytes]:
    return [line for line in path.read_bytes().split(b"\n") if line]


def _tree(root: Path) -> dict[str, bytes]:
    files = sorted(p for p in root.rglob("*") if p.is_file())
    return {str(p.relative_to(root)): p.read_bytes() for p in files}


def test_merge_into_empty_copies_every_record_verbatim(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    for i in range(3):
        _reading(src, "SN1", i, float(i))
    _reading(src, "SN2", 0, 5.0, profile="cw4")
    report = merge(src, dst)
    assert (report.added, report.already_present, report.boards) == (4, 0, 2)
    assert report.conflicts == () and report.damaged == () and report.skipped == ()
    assert (dst / "cw6" / "SN1.jsonl").read_bytes() == (src / "cw6" / "SN1.jsonl").read_bytes()
    assert (dst / "cw4" / "SN2.jsonl").read_bytes() == (src / "cw4" / "SN2.jsonl").read_bytes()


def test_merging_twice_changes_nothing(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    for i in range(4):
        _reading(src, "SN1", 2 * i, float(i))
        _reading(dst, "SN1", 2 * i + 1, float(-i))
    first = merge(src, dst)
    after_first = _tree(dst)
    second = merge(src, dst)
    assert (first.added, first.already_present) == (4, 0)
    assert (second.added, second.already_present, second.conflicts) == (0, 4, ())
    assert _tree(dst) == after_first
    assert (src / "cw6" / "SN1.jsonl").exists()  # the source is never touched


def test_merge_orders_by_time_and_keeps_every_line_byte_for_byte(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    for i in range(5):
        _reading(src, "SN1", 2 * i, float(i))  # even hours
        _reading(dst, "SN1", 2 * i + 1, float(i))  # odd hours
    before = set(_lines(dst / "cw6" / "SN1.jsonl")) | set(_lines(src / "cw6" / "SN1.jsonl"))
    inode = (dst / "cw6" / "SN1.jsonl").stat().st_ino
    merge(src, dst)
    path = dst / "cw6" / "SN1.jsonl"
    lines = _lines(path)
    assert set(lines) == before and len(lines) == 10  # nothing dropped, nothing rewritten
    times = [json.loads(line)["time"] for line in lines]
    assert times == sorted(times)
    assert path.stat().st_ino != inode  # replaced through a new file, not edited in place
    assert [p.name for p in path.parent.iterdir()] == ["SN1.jsonl"]  # no temp file left


def test_records_all_later_are_appended_in_place(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    _reading(dst, "SN1", 0, 1.0)
    _reading(src, "SN1", 5, 2.0)
    _reading(src, "SN1", 4, 3.0)
    path = dst / "cw6" / "SN1.jsonl"
    inode, head = path.stat().st_ino, path.read_bytes()
    merge(src, dst)
    assert path.stat().st_ino == inode and path.read_bytes().startswith(head)
    assert [json.loads(line)["value"] for line in _lines(path)] == [1.0, 3.0, 2.0]


def test_same_id_with_different_content_is_kept_twice_and_reported(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    rid = "c" * 32
    h.append(dst, "cw6", "SN1", reading("S1", 1.0), time=_at(0), record_id=rid)
    h.append(src, "cw6", "SN1", reading("S1", 9.0), time=_at(0), record_id=rid)
    report = merge(src, dst)
    assert [(c.board, c.profile, c.id) for c in report.conflicts] == [("SN1", "cw6", rid)]
    assert report.added == 1
    volts = sorted(e.event.measurement.value for e in h.read_board(dst, "SN1").events)
    assert volts == [1.0, 9.0]
    again = merge(src, dst)  # both versions already there: nothing new, nothing lost
    assert (again.added, again.already_present, again.conflicts) == (0, 1, ())
    assert len(h.read_board(dst, "SN1").events) == 2


def test_same_record_spelled_differently_is_not_a_conflict(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    rec = h.append(dst, "cw6", "SN1", reading("S1", 1.0), time=_at(0))
    respelled = json.dumps(dict(reversed(list(rec.to_dict().items()))), indent=None)
    (src / "cw6").mkdir(parents=True)
    (src / "cw6" / "SN1.jsonl").write_text(respelled + "\n")
    report = merge(src, dst)
    assert (report.added, report.already_present, report.conflicts) == (0, 1, ())


def test_torn_tail_in_the_source_is_reported_and_not_merged(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    _reading(src, "SN1", 0, 1.0)
    source = src / "cw6" / "SN1.jsonl"
    with open(source, "ab") as f:
        f.write(b'{"schema":1,"id":"torn","time":"2026-03-01T09:00:00.000000Z","ki')
    untouched = source.read_bytes()
    report = merge(src, dst)
    assert report.added == 1
    assert [d.reason for d in report.damaged] == ["torn last line (no newline)"]
    assert b"torn" not in (dst / "cw6" / "SN1.jsonl").read_bytes()
    assert source.read_bytes() == untouched


@pytest.mark.parametrize(
    "bad",
    [
        b"\xff\xfe not text at all",
        b'{"schema":1,"id":"x1","time":"2026-03-01T12:00:00Z","kind":"reading","n":"\xff"}',
        b"[1, 2, 3]",
        b'{"schema":1,"id":"torn-mid","ti',
    ],
    ids=["binary", "json-but-not-utf8", "not-an-object", "cut-short"],
)
def test_damaged_destination_lines_survive_a_rewrite_byte_for_byte(tmp_path, bad):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    _reading(dst, "SN1", 2, 1.0)
    path = dst / "cw6" / "SN1.jsonl"
    with open(path, "ab") as f:
        f.write(bad + b"\n")
    _reading(dst, "SN1", 4, 2.0)
    _reading(src, "SN1", 1, 3.0)  # earlier than everything: forces a rewrite
    merge(src, dst)
    lines = _lines(path)
    assert bad in lines
    assert lines.index(bad) == 2  # still right after the record it followed
    assert [json.loads(line)["value"] for line in lines if line != bad] == [3.0, 1.0, 2.0]


def test_torn_tail_in_the_destination_is_kept_and_not_glued_to_new_records(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    _reading(dst, "SN1", 0, 1.0)
    path = dst / "cw6" / "SN1.jsonl"
    torn = b'{"schema":1,"id":"dead","time":"2026-'
    with open(path, "ab") as f:
        f.write(torn)
    _reading(src, "SN1", 3, 2.0)
    merge(src, dst)
    history = h.read_board(dst, "SN1")
    assert [e.event.measurement.value for e in history.events] == [1.0, 2.0]
    assert [d.text for d in history.damaged] == [torn.decode()]


def test_hostile_and_hidden_names_in_the_source_are_skipped_and_reported(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    _reading(src, "SN1", 0, 1.0)
    (src / "cw6" / "bad\x07name.jsonl").write_text("{}\n")
    (src / ".trash").mkdir()
    (src / ".trash" / "SN9.jsonl").write_text("{}\n")
    report = merge(src, dst)
    assert report.added == 1 and len(report.skipped) == 1
    assert "control character" in report.skipped[0]
    assert sorted(p.name for p in (dst / "cw6").iterdir()) == ["SN1.jsonl"]
    assert not (dst / ".trash").exists()


def test_merge_refuses_itself_a_missing_source_and_a_profile_folder(tmp_path):
    logs = tmp_path / "logs"
    _reading(logs, "SN1", 0, 1.0)
    with pytest.raises(h.HistoryError, match="into itself"):
        merge(logs, logs)
    with pytest.raises(h.HistoryError, match="not a folder"):
        merge(tmp_path / "nowhere", logs)
    with pytest.raises(h.HistoryError, match="looks like one profile's folder"):
        merge(logs / "cw6", tmp_path / "other")


def test_merge_into_a_read_only_folder_fails_clearly_and_changes_nothing(tmp_path, read_only_dir):
    src = tmp_path / "laptop"
    _reading(src, "SN1", 0, 1.0)
    dst = read_only_dir(tmp_path / "shop")
    before = _tree(src)
    with pytest.raises(h.HistoryError, match="could not merge into .*SN1.jsonl"):
        merge(src, dst)
    assert _tree(src) == before and list(dst.iterdir()) == []


def test_unreadable_source_file_is_skipped_and_the_rest_merges(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    _reading(src, "SN1", 0, 1.0)
    (src / "cw6" / "SN2.jsonl").mkdir()  # a folder where a file should be: not readable
    (src / "cw6" / "SN3.jsonl").symlink_to(tmp_path / "missing-target")
    report = merge(src, dst)
    assert report.added == 1 and report.boards == 1
    assert sorted(p.name for p in (dst / "cw6").iterdir()) == ["SN1.jsonl"]


def test_merge_keeps_newer_schema_records_untouched(tmp_path):
    src, dst = tmp_path / "laptop", tmp_path / "shop"
    future = {"schema": 7, "id": "f" * 32, "time": "2031-01-01T00:00:00Z", "kind": "x", "v": [1]}
    (src / "cw6").mkdir(parents=True)
    line = json.dumps(future, separators=(",", ":")).encode()
    (src / "cw6" / "SN1.jsonl").write_bytes(line + b"\n")
    merge(src, dst)
    assert _lines(dst / "cw6" / "SN1.jsonl") == [line]


def test_concurrent_writer_during_merge_loses_nothing(tmp_path):
    """A merge rewrite and an append racing on one board: every record survives."""
    import multiprocessing

    src, dst = tmp_path / "laptop", tmp_path / "shop"
    for i in range(200):
        _reading(src, "SN1", i, float(i))
        _reading(dst, "SN1", i + 0.5, float(-i))
    ctx = multiprocessing.get_context("fork")
    writer = ctx.Process(target=_append_many_readings, args=(str(dst), 100))
    writer.start()
    merge(src, dst)
    writer.join(30)
    assert writer.exitcode == 0
    history = h.read_board(dst, "SN1")
    assert len(history.events) == 500 and history.damaged == ()
    assert len({r.id for r in history.events}) == 500


def _append_many_readings(logs: str, count: int) -> None:
    for i in range(count):
        h.append(logs, "cw6", "SN1", reading("S2", float(i)))


def test_cli_merge_into_a_read_only_folder_is_one_clear_line(tmp_path, capsys, read_only_dir):
    """`fieldtool logs merge` into a folder it may not write: exit 2, one line, nothing made."""
    from fieldtool.cli import main

    logs = tmp_path / "laptop"
    _reading(logs, "SN1", 0, 1.0)
    shop = read_only_dir(tmp_path / "shop")
    code = main(["logs", "merge", str(logs), "--logs", str(shop)])
    out, err = capsys.readouterr()
    assert code == 2 and out == "" and err.count("\n") == 1
    assert err.startswith("fieldtool: history: could not merge into")
    assert list(shop.iterdir()) == []


def test_cli_record_into_a_read_only_folder_is_one_clear_line(
    tmp_path, capsys, read_only_dir, monkeypatch
):
    """`fieldtool record` into a folder it may not write: exit 2, one line, nothing made."""
    from fieldtool.cli import main
    from tests.conftest import ROOT

    monkeypatch.setenv("FIELDTOOL_CACHE", str(tmp_path / "dictionary"))
    logs = read_only_dir(tmp_path / "logs")
    readings = tmp_path / "r.csv"
    readings.write_text("node,volts\nS0,3.3\nOUT,9.0\n")
    profile = ROOT / "fieldtool" / "profiles" / "datalogger-eeprom-dickson.toml"
    argv = ["record", str(profile), "--board", "DL-1", "--readings", str(readings)]
    code = main([*argv, "--logs", str(logs)])
    out, err = capsys.readouterr()
    assert code == 2 and out == "" and err.count("\n") == 1
    assert "could not save 4 records" in err and "nothing was written" in err
    assert list(logs.iterdir()) == []


def test_merge_by_worker_processes_matches_one_process(tmp_path):
    src = tmp_path / "laptop"
    for serial in ("SN1", "SN2", "SN3", "SN4", "SN5"):
        for i in range(6):
            _reading(src, serial, 2 * i, float(i))
    rid = "d" * 32
    h.append(src, "cw6", "SN1", reading("S9", 1.0), time=_at(50), record_id=rid)
    shop = tmp_path / "shop"
    for serial in ("SN1", "SN2", "SN3"):
        _reading(shop, serial, 3, 9.0)
    h.append(shop, "cw6", "SN1", reading("S9", 2.0), time=_at(50), record_id=rid)
    results = {}
    for workers in (1, 2):
        dst = tmp_path / f"shop{workers}"
        shutil.copytree(shop, dst)
        results[workers] = (merge(src, dst, workers=workers), _tree(dst))
    (one, tree_one), (two, tree_two) = results[1], results[2]
    assert (one.added, one.already_present, one.boards) == (two.added, two.already_present, 5)
    assert one.conflicts == two.conflicts and len(one.conflicts) == 1
    assert tree_one == tree_two and len(tree_one) == 5
