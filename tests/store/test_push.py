"""``logs push`` and ``logs pull`` against a real server: idempotent, conflicts and damaged
lines as ``logs merge`` reports them, byte-identical lines, nothing lost or doubled when the
connection drops or when several laptops push at once."""

from __future__ import annotations

import json
import shutil
import threading

import pytest

from fieldtool.core import history as h
from fieldtool.core.history.fleet import fleet_view as files_view
from fieldtool.core.history.merge import merge
from fieldtool.store import StoreAddress, StoreUnavailable
from fieldtool.store import fleet as store_fleet
from fieldtool.store.push import CURSOR_NAME, push
from fieldtool.store.read import pull
from tests.history.helpers import day, session
from tests.store.conftest import new_database
from tests.store.helpers import (
    HOSTILE_SERIALS,
    HOSTILE_TEXT,
    OLDER_SERIALS,
    raw_line,
    run,
    varied_fleet,
)


def _lines(logs) -> set[bytes]:
    """Every non-empty line of every board file."""
    return {
        line
        for path in logs.glob("*/*.jsonl")
        for line in path.read_bytes().split(b"\n")
        if line.strip()
    }


def _count(admin) -> int:
    return admin("SELECT count(*) FROM fieldtool.records")[0][0]


def test_push_twice_sends_nothing_new(tmp_path, store, admin, capsys):
    logs = tmp_path / "logs"
    varied_fleet(logs, "cw6", 5)
    total = len(_lines(logs))
    code, out, _ = run(capsys, "logs", "push", "--store", store.conninfo, "--logs", str(logs))
    assert code == 0 and f": {total} new records on 13 boards, 0 already present" in out
    assert _count(admin) == total
    for extra in ([], ["--all"]):
        code, out, _ = run(
            capsys, "logs", "push", "--store", store.conninfo, "--logs", str(logs), *extra
        )
        assert code == 0 and f": 0 new records on 13 boards, {total} already present" in out
    assert _count(admin) == total
    # A session added on the laptop: only it goes, the unchanged files are not read again.
    session(logs, "SN5-03", day(90), "fixed", [("D1", "short")])  # 5 records
    report = push(store, logs)
    assert (report.added, report.already_present) == (5, total)
    assert _count(admin) == total + 5 == len(_lines(logs))


def test_the_cursor_never_hides_records_the_store_lost(tmp_path, pg, store, admin):
    """A store restored from an older backup keeps its id but lacks records: they are resent."""
    logs = tmp_path / "logs"
    session(logs, "SN1", day(0), "fixed", [("D5", "open")])
    push(store, logs)
    backup = new_database(pg, template=store.conninfo.rsplit("/", 1)[1])
    session(logs, "SN1", day(5), "fixed", [("C4", "short")])
    session(logs, "SN2", day(6), "fixed", [("D1", "open")])
    push(store, logs)
    assert (tmp_path / "logs" / CURSOR_NAME).exists()
    restored = StoreAddress(store.conninfo.rsplit("/", 1)[0] + f"/{backup}", "--store")
    report = push(restored, logs)
    assert report.added == 10  # the two later sessions (5 records each), cursor or not
    assert store_fleet.fleet_view(restored, "cw6").to_json() == files_view(logs, "cw6").to_json()


def test_conflicts_and_damaged_lines_are_reported_as_merge_reports_them(
    tmp_path, store, admin, capsys
):
    laptop, other = tmp_path / "laptop", tmp_path / "other"
    session(laptop, "SN1", day(0), "fixed", [("D5", "open")])
    shutil.copytree(laptop, other)
    path = h.board_path(laptop, "cw6", "SN1")
    lines = path.read_text().splitlines()
    changed = json.loads(lines[3])  # the action: same id, another content on this laptop
    changed["mode"] = "short"
    respelled = json.dumps(json.loads(lines[1]), indent=None, separators=(", ", ": "))
    damaged = [b"not json at all", b"\xff\xfe not utf-8", b'{"schema":1,"kind":"reading"}']
    body = "\n".join([lines[0], respelled, lines[2], json.dumps(changed), *lines[4:]])
    path.write_bytes(body.encode() + b"\n" + b"\n".join(damaged) + b'\n{"torn":')
    # What `logs merge` says about this folder, merged into a copy of the other one.
    merged = tmp_path / "merged"
    shutil.copytree(other, merged)
    expected = merge(laptop, merged)
    push(store, other)
    code, out, _ = run(
        capsys, "logs", "push", "--store", store.conninfo, "--logs", str(laptop), "--json"
    )
    got = json.loads(out)
    assert code == 0
    assert got["conflicts"] == [vars(c) for c in expected.conflicts] != []
    assert got["damaged"] == [vars(d) for d in expected.damaged]
    assert [d["line"] for d in got["damaged"]] == [6, 7, 8, 9]  # after the 5 records
    assert got["damaged"][-1]["reason"] == "torn last line (no newline)"
    assert (got["added"], got["already_present"]) == (expected.added, expected.already_present)
    # Both versions of the conflicting id are kept; no damaged line was sent.
    rows = admin("SELECT version FROM fieldtool.records WHERE id = %s ORDER BY 1", (changed["id"],))
    assert rows == [(0,), (1,)]
    assert _count(admin) == len(_lines(merged) - set(damaged) - {b'{"torn":'})
    # Pushed again: the conflicting version is stored now, so nothing new and no conflict.
    text = run(capsys, "logs", "push", "--store", store.conninfo, "--logs", str(laptop))[1]
    assert " conflict" not in text and "0 new records on 1 board, 5 already" in text
    assert "4 damaged lines in the source, not sent (left there untouched):" in text


def test_hostile_names_and_text_come_back_byte_for_byte(tmp_path, store, admin):
    logs = tmp_path / "logs"
    for i, serial in enumerate(HOSTILE_SERIALS):
        session(logs, serial, day(i), "fixed", [("D5", "open")], profile="cw6")
    for serial in HOSTILE_SERIALS + OLDER_SERIALS:
        for text in HOSTILE_TEXT:
            raw_line(logs, "cw6", serial, kind="action", designator=text, mode="open", done=text,
                     part_used=text, note=text, session=text, time=h.now_utc())  # fmt: skip
        raw_line(logs, "cw6", serial, kind=HOSTILE_TEXT[0], id=HOSTILE_TEXT[1], session="x")
    before = _count(admin)
    push(store, logs)
    assert _count(admin) == before + len(_lines(logs))
    assert admin("SELECT count(*) FROM fieldtool.meta")[0][0] >= 3  # nothing was dropped
    back = tmp_path / "back"
    report = pull(store, HOSTILE_SERIALS + OLDER_SERIALS, back)
    assert report.added == len(_lines(logs)) and not report.conflicts
    for path in logs.glob("*/*.jsonl"):
        assert (back / path.parent.name / path.name).read_bytes() == path.read_bytes()
    assert store_fleet.fleet_view(store, "cw6").to_json() == files_view(logs, "cw6").to_json()


def test_a_dropped_connection_loses_nothing_and_doubles_nothing(tmp_path, pg, store, admin):
    logs = tmp_path / "logs"
    varied_fleet(logs, "cw6", 6, boards=20)
    total = len(_lines(logs))
    batches = []

    def kill_third_batch(event: str, added: int) -> None:
        # The third batch is in the server's temporary table or table, not committed: cut
        # the connection from another one, as a dropped network would.
        batches.append(event)
        if event == "staged" and batches.count("staged") == 3:
            admin(
                "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                "WHERE application_name = 'fieldtool' AND pid <> pg_backend_pid()"
            )

    with pytest.raises(StoreUnavailable) as lost:
        push(store, logs, batch_records=40, progress=kill_third_batch)
    saved = _count(admin)
    assert 0 < saved < total and "push again to send the rest" in lost.value.message
    assert f"{saved} new records were saved before that" in lost.value.message
    report = push(store, logs, batch_records=40)
    assert report.added == total - saved
    assert _count(admin) == total == len(admin("SELECT DISTINCT id, line FROM fieldtool.records"))
    assert store_fleet.fleet_view(store, "cw6").to_json() == files_view(logs, "cw6").to_json()


def test_laptops_pushing_at_once_lose_nothing_and_double_nothing(tmp_path, store, admin):
    """Eight laptops share boards (each pulled their history before the job) and add their
    own sessions; all push at once in small batches. The store then holds exactly the union,
    and its fleet view equals the files' view of all laptops merged."""
    shared = tmp_path / "shared"
    varied_fleet(shared, "cw6", 7, boards=10)
    laptops = []
    for n in range(8):
        folder = tmp_path / f"laptop{n}"
        shutil.copytree(shared, folder)
        for b in range(n % 3, 10, 3):  # overlapping sets of boards
            session(folder, f"SN7-{b:02d}", day(200 + n), "fixed", [("D2", "open")], verify=True)
        laptops.append(folder)
    errors = []

    def one(folder):
        try:
            push(store, folder, batch_records=25)
        except Exception as exc:  # noqa: BLE001 - reported below, with its laptop
            errors.append((folder.name, exc))

    threads = [threading.Thread(target=one, args=(f,)) for f in laptops]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    union = set().union(*(_lines(f) for f in laptops))
    assert _count(admin) == len(union)
    everything = tmp_path / "everything"
    for folder in laptops:
        merge(folder, everything, workers=1)
    assert store_fleet.fleet_view(store, "cw6").to_json() == files_view(everything, "cw6").to_json()


def test_pull_merges_into_the_laptop_without_changing_its_records(tmp_path, store, capsys):
    shop, laptop = tmp_path / "shop", tmp_path / "laptop"
    session(shop, "SN1", day(0), "fixed", [("D5", "open")], verify=True)
    session(shop, "SN2", day(1), "fixed", [("C4", "short")])
    push(store, shop)
    session(laptop, "SN1", day(3), None, [("D1", "open")])
    mine = h.board_path(laptop, "cw6", "SN1").read_bytes()
    code, out, _ = run(
        capsys, "logs", "pull", "SN1", "--store", store.conninfo, "--logs", str(laptop)
    )
    assert code == 0 and "6 new records on 1 board, 0 already present" in out
    after = h.board_path(laptop, "cw6", "SN1").read_bytes()
    assert set(mine.splitlines()) <= set(after.splitlines())
    assert not h.board_path(laptop, "cw6", "SN2").exists()
    code, out, _ = run(
        capsys, "logs", "pull", "SN1", "--store", store.conninfo, "--logs", str(laptop)
    )
    assert "0 new records on 1 board, 6 already present" in out
    code, _, err = run(
        capsys, "logs", "pull", "SN9", "--store", store.conninfo, "--logs", str(laptop)
    )
    assert code == 2 and "no history for board 'SN9'" in err and err.count("\n") == 1
