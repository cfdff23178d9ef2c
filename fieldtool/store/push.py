"""``logs push``: send every record of a logs folder that the store lacks.

Each line is parsed as the history reads it (``history.parse_lines``); damaged lines are
reported and never sent. Whole board files go in batches, one transaction each. A batch is
first sent with COPY straight into ``records``, which is quickest and is what a first push
meets; if the store already holds one of its ids, the server refuses that COPY whole and the
batch goes again through a temporary table: ``INSERT ... ON CONFLICT DO NOTHING``, then each
row it left out is looked at. The same bytes, or the same record spelled differently, are
already present; other content under a known id is a conflict, stored as the id's next
version and listed as ``logs merge`` lists it. A dropped connection loses only the batch in
flight (the server rolls it back); pushing again sends it again, and nothing committed is
doubled, because an id's content is stored once.

A push cursor, ``<logs>/.store-pushed.json``, remembers per store which board files were sent
whole, with each file's identity when it was read (inode, device, size, modification and
change times: any append or rewrite changes one of them). An unchanged file is skipped while
the store still holds at least as many records of that board as the file had; any doubt
sends the file again and the store keeps what it already has. ``--all`` ignores the cursor.
"""

from __future__ import annotations

import itertools
import json
import multiprocessing
import os
import threading
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from fieldtool.core.history import (
    BadNameError,
    Damaged,
    HistoryError,
    check_name,
    parse_lines,
    parse_object,
)
from fieldtool.core.history.files import identity, read_with_identity, rewrite
from fieldtool.core.history.merge import Conflict, MergeReport, same_record, source_files
from fieldtool.core.words import count
from fieldtool.store.columns import COLUMNS, cell, copy_line, from_column, to_column
from fieldtool.store.config import StoreAddress
from fieldtool.store.connect import connected, driver
from fieldtool.store.errors import StoreUnavailable

CURSOR_NAME = ".store-pushed.json"
CURSOR_FORMAT = 1
BATCH_RECORDS = 20_000  # records per transaction (whole files: a batch may hold a few more)
PARALLEL_FILES = 200  # from this many files to read, they are parsed in forked workers
RETRIES = 3  # a batch that meets a deadlock or serialization failure is sent again

_CONFIGURE = """
SET work_mem = '64MB';
SET temp_buffers = '64MB';
CREATE TEMP TABLE IF NOT EXISTS push_staging (
    id text COLLATE "C", profile text COLLATE "C", board text COLLATE "C",
    kind text COLLATE "C", session text COLLATE "C", tk text COLLATE "C", us bigint,
    schema_version integer, designator text COLLATE "C", mode text COLLATE "C",
    outcome text COLLATE "C", line text
) ON COMMIT DELETE ROWS;
"""
_COLUMN_LIST = ", ".join(COLUMNS)
_COPY_DIRECT = f"COPY fieldtool.records ({_COLUMN_LIST}) FROM STDIN"
_COPY_STAGED = f"COPY pg_temp.push_staging ({_COLUMN_LIST}) FROM STDIN"
# The first row carries the count inserted; the others are rows neither inserted now nor
# stored before, byte for byte: conflicts, or a record stored meanwhile by another push.
_INSERT_STAGED = f"""
WITH added AS (
    INSERT INTO fieldtool.records ({_COLUMN_LIST})
    SELECT {_COLUMN_LIST} FROM pg_temp.push_staging
    ON CONFLICT DO NOTHING
    RETURNING id, md5(line) AS h
), left_out AS (
    SELECT s.* FROM pg_temp.push_staging s
    WHERE NOT EXISTS (SELECT 1 FROM added a WHERE a.id = s.id AND a.h = md5(s.line))
)
SELECT NULL, NULL, NULL, NULL, (SELECT count(*) FROM added)
UNION ALL
SELECT l.profile, l.board, l.id, l.line, NULL FROM left_out l
WHERE NOT EXISTS (SELECT 1 FROM fieldtool.records r WHERE r.id = l.id AND r.line = l.line)
"""
_NEXT_VERSION = f"""
INSERT INTO fieldtool.records (version, {_COLUMN_LIST})
SELECT (SELECT coalesce(max(version), -1) + 1 FROM fieldtool.records WHERE id = %(id)s),
    {_COLUMN_LIST}
FROM pg_temp.push_staging WHERE id = %(id)s AND line = %(line)s LIMIT 1
ON CONFLICT DO NOTHING RETURNING 1
"""

Progress = Callable[[str, int], None]  # (event, records added so far): "staged", "committed"


@dataclass(frozen=True)
class _Parsed:
    """One board file, read and turned into COPY rows (made in a worker process too)."""

    key: str  # "<profile>/<serial>.jsonl", the cursor's key
    identity: tuple[int, ...] = ()
    records: int = 0
    damaged: tuple[Damaged, ...] = ()
    rows: bytes = b""
    skipped: str | None = None


def _parse_file(job: tuple[str, str, str]) -> _Parsed:
    """Read one board file (identity first) and turn its records into COPY rows."""
    profile, serial, name = job
    path = Path(name)
    key = f"{profile}/{path.name}"
    try:
        check_name(profile, "profile name", existing=True)
        check_name(serial, existing=True)
    except BadNameError as exc:
        return _Parsed(key, skipped=f"{path}: {exc.message}")
    try:
        ident, data = read_with_identity(path)
    except OSError as exc:
        return _Parsed(key, skipped=f"could not read {path}: {exc.strerror or exc}")
    found, damaged = parse_lines(data, str(path), parse_object)
    p, b = cell(profile), cell(serial)
    rows = "".join(copy_line(p, b, obj, line) for obj, line in found).encode("utf-8")
    return _Parsed(key, tuple(ident), len(found), tuple(damaged), rows)


class _Parsers:
    """Parses board files, in forked worker processes for large folders (as ``merge`` does).

    The workers are forked when this opens, before any connection to the store exists, so
    no child ever holds a copy of it; at most ``AHEAD`` parsed files wait in memory.
    """

    AHEAD = 128  # files: about two batches, so parsing goes on while the server works

    def __init__(self, files: int) -> None:
        can_fork = "fork" in multiprocessing.get_all_start_methods()
        cores = min(os.cpu_count() or 1, 4)
        parallel = files >= PARALLEL_FILES and cores > 1 and can_fork
        self.pool = None
        if parallel and threading.active_count() == 1:
            context = multiprocessing.get_context("fork")
            self.pool = ProcessPoolExecutor(cores, mp_context=context)
            self.pool.submit(int).result()  # forks every worker now

    def __enter__(self) -> _Parsers:
        return self

    def __exit__(self, *exc) -> None:
        if self.pool is not None:
            self.pool.shutdown(cancel_futures=True)

    def parse(self, jobs: list[tuple[str, str, str]]) -> Iterator[_Parsed]:
        """Every job parsed, in order."""
        if self.pool is None:
            yield from map(_parse_file, jobs)
            return
        waiting: deque = deque()
        pending = iter(jobs)
        for job in itertools.islice(pending, self.AHEAD):
            waiting.append(self.pool.submit(_parse_file, job))
        while waiting:
            done = waiting.popleft().result()
            job = next(pending, None)
            if job is not None:
                waiting.append(self.pool.submit(_parse_file, job))
            yield done


@dataclass
class _Tally:
    added: int = 0
    present: int = 0
    boards: int = 0
    conflicts: list[Conflict] = field(default_factory=list)
    damaged: list[Damaged] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)

    def report(self) -> MergeReport:
        return MergeReport(
            added=self.added,
            already_present=self.present,
            boards=self.boards,
            conflicts=tuple(self.conflicts),
            damaged=tuple(self.damaged),
            skipped=tuple(self.skipped),
        )


class _Sender:
    """Gathers whole files into batches and sends each batch in its own transaction."""

    def __init__(self, conn, tally: _Tally, batch_records: int, progress: Progress | None):
        self.conn, self.tally = conn, tally
        self.batch_records, self.progress = batch_records, progress
        self.files: list[_Parsed] = []
        self.count = 0
        self.done: list[_Parsed] = []  # files whose every record is committed
        self.direct = True  # COPY straight in until the store turns out to hold some ids

    def add(self, file: _Parsed) -> None:
        self.files.append(file)
        self.count += file.records
        if self.count >= self.batch_records:
            self.flush()

    def flush(self) -> None:
        if not self.files:
            return
        if self.count:
            self._send_batch()
        self.done += self.files
        self.files, self.count = [], 0
        if self.progress:
            self.progress("committed", self.tally.added)

    def _send_batch(self) -> None:
        psycopg = driver()
        for attempt in range(RETRIES):
            try:
                if self.direct:
                    try:
                        self._copy_direct()
                        return
                    except psycopg.errors.UniqueViolation:
                        self.direct = False  # rolled back: the same batch goes through staging
                self._copy_staged()
                return
            except (psycopg.errors.DeadlockDetected, psycopg.errors.SerializationFailure):
                if attempt == RETRIES - 1:
                    raise

    def _write(self, cur, statement: str) -> None:
        with cur.copy(statement) as copy:
            for file in self.files:
                if file.rows:
                    copy.write(file.rows)
        if self.progress:
            self.progress("staged", self.tally.added)

    def _copy_direct(self) -> None:
        with self.conn.transaction(), self.conn.cursor() as cur:
            self._write(cur, _COPY_DIRECT)
        self.tally.added += self.count

    def _copy_staged(self) -> None:
        conflicts: list[Conflict] = []
        with self.conn.transaction(), self.conn.cursor() as cur:
            self._write(cur, _COPY_STAGED)
            rows = cur.execute(_INSERT_STAGED).fetchall()
            inserted = next(n for p, _, _, _, n in rows if p is None)
            for profile, board, rid, line in (r[:4] for r in rows if r[0] is not None):
                if self._store_version(cur, rid, line):
                    conflict = Conflict(from_column(board), from_column(profile), from_column(rid))
                    conflicts.append(conflict)
        added = inserted + len(conflicts)
        self.tally.added += added
        self.tally.present += self.count - added
        self.tally.conflicts += conflicts
        self.direct = added == self.count  # nothing was there: try the quick way again

    def _store_version(self, cur, rid: str, line: str) -> bool:
        """Store new content of a known id as its next version; False if already there."""
        raw = line.encode("utf-8")
        for _ in range(RETRIES + 2):
            versions = cur.execute("SELECT line FROM fieldtool.records WHERE id = %s", (rid,))
            if any(same_record(raw, v.encode("utf-8")) for (v,) in versions):
                return False  # the same record, spelled differently or stored meanwhile
            if cur.execute(_NEXT_VERSION, {"id": rid, "line": line}).fetchone() is not None:
                return True
        raise StoreUnavailable(f"record {from_column(rid)!r} kept changing while it was pushed")


def _load_cursor(logs: Path) -> dict[str, Any]:
    try:
        data = json.loads((logs / CURSOR_NAME).read_bytes())
        stores = data["stores"] if data.get("format") == CURSOR_FORMAT else {}
    except (OSError, ValueError, TypeError, KeyError, AttributeError):
        return {}
    return stores if isinstance(stores, dict) else {}


def _save_cursor(logs: Path, store_id: str, files: dict[str, Any]) -> None:
    stores = _load_cursor(logs)
    stores[store_id] = files
    payload = json.dumps({"format": CURSOR_FORMAT, "stores": stores}, separators=(",", ":"))
    try:
        rewrite(logs / CURSOR_NAME, [payload])
    except OSError:
        pass  # a read-only logs folder: every push checks every file, nothing is lost


def push(
    address: StoreAddress,
    logs_dir: Path | str,
    *,
    use_cursor: bool = True,
    batch_records: int = BATCH_RECORDS,
    progress: Progress | None = None,
) -> MergeReport:
    """Send every record of ``logs_dir`` the store lacks (see module docstring).

    Raises:
        HistoryError: the logs folder cannot be read.
        StoreUnavailable: the connection failed or was lost (what was committed stays).
    """
    logs = Path(logs_dir)
    if not logs.is_dir():
        raise HistoryError(f"cannot push {logs}: not a folder; pass --logs DIR")
    files = source_files(logs)
    tally = _Tally()
    started = False
    try:
        with _Parsers(len(files)) as parsers, connected(address, then="") as conn:
            started = True
            _push_files(conn, logs, files, tally, parsers, use_cursor, batch_records, progress)
    except StoreUnavailable as exc:
        if not started:
            raise
        raise StoreUnavailable(
            f"{exc.message}; {count(tally.added, 'new record')} "
            f"{'was' if tally.added == 1 else 'were'} saved before that and stay "
            "saved; push again to send the rest (nothing is sent twice)"
        ) from None
    return tally.report()


def _push_files(conn, logs, files, tally, parsers, use_cursor, batch_records, progress) -> None:
    conn.execute(_CONFIGURE)
    store_id = conn.execute("SELECT value FROM fieldtool.meta WHERE key = 'store_id'").fetchone()[0]
    cursor = _load_cursor(logs).get(store_id, {}) if use_cursor else {}
    if not isinstance(cursor, dict):
        cursor = {}
    counts = {}
    if cursor:
        rows = conn.execute("SELECT profile, board, records FROM fieldtool.boards")
        counts = {(p, b): n for p, b, n in rows}
    kept: dict[str, Any] = {}
    jobs = []
    for profile, serial, path in files:
        key = f"{profile}/{path.name}"
        if _unchanged(cursor.get(key), path, counts.get((to_column(profile), to_column(serial)))):
            kept[key] = cursor[key]
            tally.present += cursor[key]["records"]
            tally.boards += 1
        else:
            jobs.append((profile, serial, str(path)))
    sender = _Sender(conn, tally, batch_records, progress)
    try:
        for file in parsers.parse(jobs):
            tally.damaged += file.damaged
            if file.skipped:
                tally.skipped.append(file.skipped)
                continue
            tally.boards += bool(file.records)
            sender.add(file)
        sender.flush()
    finally:
        for file in sender.done:
            if not file.damaged:
                kept[file.key] = {"identity": list(file.identity), "records": file.records}
        _save_cursor(logs, store_id, kept)


def _unchanged(known: Any, path: Path, stored: int | None) -> bool:
    """True when the cursor's entry still describes the file and the store has its records."""
    if not isinstance(known, dict) or not isinstance(known.get("records"), int):
        return False
    try:
        now = identity(path.stat())
    except OSError:
        return False
    return known.get("identity") == now and (stored or 0) >= known["records"]
