"""The history store on real files: durability, torn tails, hostile names, newer schemas."""

from __future__ import annotations

import json
import multiprocessing
import os
from datetime import UTC, datetime
from pathlib import Path

import pytest

from fieldtool.core import history as h
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.history.sessions import group_sessions, open_session
from fieldtool.core.measurement import Source
from tests.readings import dc, reading, verification


def _opened(tech: str = "ana") -> h.SessionOpened:
    return h.SessionOpened(technician=tech, profile_hash="abc123", tool_version="0.1.0")


def test_append_then_read_round_trips_every_kind(tmp_path):
    events = [
        _opened(),
        reading("N3", 1234.5, spread=2.0),
        reading("N4", None, source=Source("meter", "Fluke 87V #123")),
        h.DiagnosisSnapshot(
            suspects=(h.SnapshotSuspect("C3", "short", 0.62), h.SnapshotSuspect("D2", "open", 0.2))
        ),
        h.Action(designator="C3", done="replaced", mode="short", part_used="1uF 3kV"),
        verification("N3", 2480.0),
        h.SessionClosed(outcome="fixed"),
    ]
    stored = [h.append(tmp_path, "cw6", "SN1", e) for e in events]
    history = h.read_board(tmp_path, "SN1")
    assert [r.id for r in history.events] == [r.id for r in stored]
    assert [r.event for r in history.events] == events
    assert history.damaged == ()
    assert (tmp_path / "cw6" / "SN1.jsonl").is_file()


def test_record_envelope(tmp_path):
    rec = h.append(tmp_path, "cw6", "SN1", reading("N1", 1.0))
    line = json.loads((tmp_path / "cw6" / "SN1.jsonl").read_text())
    assert line["schema"] == 2 and line["id"] == rec.id and len(rec.id) == 32
    assert line["time"].endswith("Z") and line["board"] == "SN1" and line["profile"] == "cw6"
    assert line["kind"] == "reading" and (line["at"], line["value"]) == ("N1", 1.0)
    assert (line["quantity"], line["unit"], line["source"]) == ("dc", "V", {"kind": "typed"})
    h.append(tmp_path, "cw6", "SN1", _opened())
    opened = json.loads((tmp_path / "cw6" / "SN1.jsonl").read_text().splitlines()[1])
    assert opened["schema"] == 1  # kinds that did not change keep the schema older tools read


def test_read_finds_the_serial_across_profile_folders(tmp_path):
    h.append(tmp_path, "cw6", "SN1", _opened(), time=datetime(2026, 1, 2, tzinfo=UTC))
    h.append(tmp_path, "cw4", "SN1", _opened("bo"), time=datetime(2026, 1, 1, tzinfo=UTC))
    history = h.read_board(tmp_path, "SN1")
    assert [r.profile for r in history.events] == ["cw4", "cw6"]


def test_unknown_board_is_a_clear_error(tmp_path):
    with pytest.raises(h.NotFoundError, match="no history for board 'NOPE'"):
        h.read_board(tmp_path, "NOPE")


def _writer(args: tuple[str, int, int]) -> None:
    logs, worker, count = args
    for i in range(count):
        h.append(logs, "cw6", "SHARED", reading(f"W{worker}", float(i)))


def test_concurrent_appends_from_processes_never_lose_or_interleave(tmp_path):
    workers, count = 4, 200
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(workers) as pool:
        pool.map(_writer, [(str(tmp_path), w, count) for w in range(workers)])
    raw = (tmp_path / "cw6" / "SHARED.jsonl").read_bytes()
    lines = raw.split(b"\n")
    assert lines[-1] == b"" and len(lines) - 1 == workers * count
    parsed = [json.loads(line) for line in lines[:-1]]
    for w in range(workers):
        mine = [p["value"] for p in parsed if p["at"] == f"W{w}"]
        assert mine == [float(i) for i in range(count)]  # each writer's order kept
    assert len({p["id"] for p in parsed}) == workers * count


def test_torn_tail_is_reported_kept_and_not_merged_into_the_next_record(tmp_path):
    first = h.append(tmp_path, "cw6", "SN1", reading("N1", 1.0))
    path = tmp_path / "cw6" / "SN1.jsonl"
    torn = b'{"schema":1,"id":"dead","time":"2026-'
    with open(path, "ab") as f:
        f.write(torn)
    before = h.read_board(tmp_path, "SN1")
    assert [d.reason for d in before.damaged] == ["torn last line (no newline)"]
    second = h.append(tmp_path, "cw6", "SN1", reading("N2", 2.0))
    after = h.read_board(tmp_path, "SN1")
    assert [r.id for r in after.events] == [first.id, second.id]
    assert after.events[1].event == reading("N2", 2.0)
    assert len(after.damaged) == 1 and after.damaged[0].text == torn.decode()
    assert after.damaged[0].line == 2
    assert torn + b"\n" in path.read_bytes()  # torn bytes left on disk, on their own line


def test_garbage_line_in_the_middle_is_damaged_not_fatal(tmp_path):
    h.append(tmp_path, "cw6", "SN1", reading("N1", 1.0))
    path = tmp_path / "cw6" / "SN1.jsonl"
    with open(path, "ab") as f:
        f.write(b"\xff\xfe garbage\n[1, 2]\n")
    h.append(tmp_path, "cw6", "SN1", reading("N2", 2.0))
    history = h.read_board(tmp_path, "SN1")
    assert len(history.events) == 2
    assert [d.reason for d in history.damaged] == ["not UTF-8", "not a JSON object"]


def test_parent_is_a_file_gives_a_clear_save_error(tmp_path):
    blocker = tmp_path / "logs"
    blocker.write_text("I am a file")
    with pytest.raises(h.SaveError) as caught:
        h.append(blocker, "cw6", "SN1", reading("N1", 1.0))
    message = caught.value.message
    assert "could not save reading" in message and "read-only" in message
    assert "nothing was written, the reading is kept in memory" in message
    assert blocker.read_text() == "I am a file"


def test_proc_is_refused_with_a_save_error():
    if not Path("/proc/self").is_dir():
        pytest.skip("no /proc on this system")
    with pytest.raises(h.SaveError, match="nothing was written"):
        h.append("/proc/fieldtool-logs", "cw6", "SN1", reading("N1", 1.0))


def test_full_disk_gives_a_clear_save_error(tmp_path):
    if not os.path.exists("/dev/full"):
        pytest.skip("/dev/full is not available on this system")
    (tmp_path / "cw6").mkdir()
    (tmp_path / "cw6" / "SN1.jsonl").symlink_to("/dev/full")
    with pytest.raises(h.SaveError) as caught:
        h.append(tmp_path, "cw6", "SN1", reading("N1", 1.0))
    assert "disk full" in caught.value.message
    assert "the reading is kept in memory" in caught.value.message


@pytest.mark.parametrize(
    "serial",
    ["../x", "a/b", "", "\x00", ".", "..", ".hidden", "a\\b", "sn\n1", "   ", "x" * 300],
)
def test_hostile_serials_are_refused(tmp_path, serial):
    with pytest.raises(h.BadNameError):
        h.append(tmp_path, "cw6", serial, reading("N1", 1.0))
    with pytest.raises(h.BadNameError):
        h.read_board(tmp_path, serial)
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("serial", ["SN-0001", "A12_b", "板-7", "x.y"])
def test_ordinary_serials_are_accepted(tmp_path, serial):
    h.append(tmp_path, "cw6", serial, reading("N1", 1.0))
    assert len(h.read_board(tmp_path, serial).events) == 1


def test_hostile_profile_name_is_refused(tmp_path):
    with pytest.raises(h.BadNameError, match="profile name"):
        h.append(tmp_path, "../up", "SN1", reading("N1", 1.0))


def test_newer_schema_record_is_kept_flagged_and_preserved(tmp_path):
    folder = tmp_path / "cw6"
    folder.mkdir()
    future = {
        "schema": 99,
        "id": "f" * 32,
        "time": "2030-01-01T00:00:00.000000Z",
        "board": "SN1",
        "profile": "cw6",
        "kind": "thermal-image",
        "pixels": [1, 2, 3],
    }
    (folder / "SN1.jsonl").write_text(json.dumps(future) + "\n")
    history = h.read_board(tmp_path, "SN1")
    (record,) = history.events
    assert record.newer_schema and record.event is None
    assert record.to_dict() == future and history.damaged == ()


@pytest.mark.parametrize(
    "make",
    [
        lambda: h.Reading(dc(None, 1.0)),  # a reading not placed at any node
        lambda: reading("N1", float("nan")),
        lambda: reading("N1", 1.0, spread=-0.1),
        lambda: h.SessionClosed(outcome="maybe"),
    ],
)
def test_invalid_events_are_refused(make):
    with pytest.raises(FieldtoolError):
        make()


def test_the_open_session_is_found_by_its_records(tmp_path):
    opened = _opened()
    h.append(tmp_path, "cw6", "SN1", opened, session=opened.session_id)

    def still_open():
        return open_session(group_sessions(h.read_board(tmp_path, "SN1").events))

    assert still_open().id == opened.session_id
    h.append(
        tmp_path, "cw6", "SN1", h.SessionClosed(outcome="escalated"), session=opened.session_id
    )
    assert still_open() is None


def test_logs_dir_resolution(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert h.resolve_logs_dir(None, {}) == tmp_path / "logs"
    assert h.resolve_logs_dir(None, {"FIELDTOOL_LOGS": "/x"}) == Path("/x")
    assert h.resolve_logs_dir("/y", {"FIELDTOOL_LOGS": "/x"}) == Path("/y")


def test_mixed_time_spellings_sort_by_instant():
    assert h.time_key("2026-01-01T10:00:00+00:00") == "2026-01-01T10:00:00.000000Z"
    assert h.time_key("2026-01-01T10:00:00Z") < h.time_key("2026-01-01T10:00:00.500000Z")


_WRITE_WITH_NO_ROOM = """
import resource, signal, sys
from fieldtool.core import history as h
from tests.readings import reading
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # the kernel then fails the write with EFBIG
resource.setrlimit(resource.RLIMIT_FSIZE, (0, resource.RLIM_INFINITY))
try:
    h.append(sys.argv[1], "cw6", "SN9", reading("N1", 1.0))
except h.SaveError as exc:
    print(exc.message)
"""


def test_a_first_write_that_fails_leaves_no_empty_board_file(tmp_path):
    """A process allowed no file growth (RLIMIT_FSIZE = 0, POSIX setrlimit) fails its writes
    for real, as a full disk does: the board's file must not be left behind empty, where the
    fleet and the start screen would count it as a board."""
    import subprocess
    import sys

    run = subprocess.run(
        [sys.executable, "-c", _WRITE_WITH_NO_ROOM, str(tmp_path)],
        cwd=Path(__file__).resolve().parents[2],  # so the snippet finds the tests package
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert "could not save reading" in run.stdout and "nothing was written" in run.stdout
    assert list((tmp_path / "cw6").glob("*.jsonl")) == []
    h.append(tmp_path, "cw6", "SN9", reading("N1", 1.0))  # room again: it works
    assert len(h.read_board(tmp_path, "SN9").events) == 1


def test_an_empty_board_file_from_an_older_version_is_no_history(tmp_path):
    (tmp_path / "cw6").mkdir()
    (tmp_path / "cw6" / "SN8.jsonl").write_bytes(b"")
    with pytest.raises(h.NotFoundError):
        h.read_board(tmp_path, "SN8")
    from fieldtool.core.history.fleet import fleet_view

    assert fleet_view(tmp_path, "cw6").boards == 0
    h.append(tmp_path, "cw6", "SN8", reading("N1", 1.0))
    assert fleet_view(tmp_path, "cw6").boards == 1


@pytest.mark.parametrize(
    "serial, problem",
    [
        ("TG:42", "contains ':'"),
        ("TG*42", "contains '*'"),
        ("TG?42", "contains '?'"),
        ("CON", "a name Windows reserves for a device (CON)"),
        ("com1.board", "a name Windows reserves for a device (COM1)"),
        ("TG-42.", "ends with a dot"),
    ],
)
def test_serials_the_message_refuses_are_refused(tmp_path, serial, problem):
    with pytest.raises(h.BadNameError) as caught:
        h.append(tmp_path, "cw6", serial, reading("N1", 1.0))
    assert problem in caught.value.message
    assert "use letters, digits, spaces inside, and - _ . + # ( )" in caught.value.message
    assert not (tmp_path / "cw6").exists() or list((tmp_path / "cw6").iterdir()) == []


def test_a_serial_with_spaces_around_it_is_the_same_board(tmp_path):
    h.append(tmp_path, "cw6", "TG-0042", reading("N1", 1.0))
    h.append(tmp_path, "cw6", " TG-0042 ", reading("N2", 2.0))
    history = h.read_board(tmp_path, "TG-0042 ")
    assert [r.board for r in history.events] == ["TG-0042", "TG-0042"]
    assert [p.name for p in (tmp_path / "cw6").iterdir()] == ["TG-0042.jsonl"]
