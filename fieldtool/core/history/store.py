"""Board histories: one JSON Lines file per board serial, grouped by profile.

Layout: ``<logs>/<profile-name>/<serial>.jsonl``. Every line is one record carrying
``schema``, ``id``, ``time``, ``board``, ``profile`` and ``kind``, and, since sessions from two
terminals can interleave in one file, the ``session`` id it belongs to (records written before
that field existed have none and are grouped by position). A line is appended with a
single ``os.write`` under an exclusive ``flock`` and fsynced before ``append`` returns, so
two processes never interleave and a crash can at worst leave one torn last line, which
readers report as damaged and leave on disk untouched.

HistoryError(FieldtoolError)
├── BadNameError       a serial or profile name that cannot be a file name
├── SaveError          the record could not be written (disk full, read-only, ...)
└── NotFoundError      no history for that board or profile
"""

from __future__ import annotations

import errno
import json
import os
import unicodedata
import uuid
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime, timedelta
from pathlib import Path

from fieldtool.core.errors import shown
from fieldtool.core.history.events import (
    EVENT_TYPES,
    BadNameError,
    Event,
    HistoryError,
    NotFoundError,
    SaveError,
    SessionOpened,
    event_fields,
    schema_for,
)
from fieldtool.core.history.files import append_lines, fsync_dir, locked_file, remove_if_empty
from fieldtool.core.history.records import BoardHistory, Damaged, Record, parse_lines
from fieldtool.core.names import FILE_NAME_ALLOWED, FILE_NAME_MAX_BYTES, file_name_problem
from fieldtool.core.times import format_time, now_utc, time_key

ENV_VAR = "FIELDTOOL_LOGS"


# --- names and places ---------------------------------------------------------------------


def check_name(name: object, what: str = "board serial", *, existing: bool = False) -> str:
    """``name`` with surrounding spaces removed, if it can be one file name; else BadNameError.

    A serial or profile name becomes a file or folder name, so the rule is
    ``fieldtool.core.names.file_name_problem`` (the message lists what is allowed). With
    ``existing``, a name only has to be safe to look up (no path separator, no '..', no leading
    dot, no control character), so a history an older version wrote under a name that is
    refused today can still be read and merged.
    """
    if not isinstance(name, str) or not name.strip():
        raise BadNameError(f"{what} is empty; type the {what}")
    clean = name.strip()
    if existing:
        problem = _lookup_problem(clean)
    else:
        problem = file_name_problem(clean)
    if problem:
        raise BadNameError(
            f"{what} {shown(name)} {problem}; it becomes a file name, so use {FILE_NAME_ALLOWED}"
        )
    return clean


def _lookup_problem(name: str) -> str | None:
    if "/" in name or "\\" in name or (os.altsep and os.altsep in name):
        return "contains a path separator"
    if ".." in name:
        return "contains '..'"
    if name.startswith("."):
        return "starts with a dot"
    if any(unicodedata.category(c) in ("Cc", "Cf", "Zl", "Zp") for c in name):
        return "contains a control character"
    if len(name.encode("utf-8")) > FILE_NAME_MAX_BYTES:
        return f"is longer than {FILE_NAME_MAX_BYTES} bytes"
    return None


def resolve_logs_dir(option: str | os.PathLike[str] | None, env: Mapping[str, str]) -> Path:
    """The logs folder: ``--logs`` first, then $FIELDTOOL_LOGS, then ./logs."""
    if option:
        return Path(option)
    if env.get(ENV_VAR):
        return Path(env[ENV_VAR])
    return Path.cwd() / "logs"


def board_path(logs_dir: Path | str, profile: str, serial: str, *, existing: bool = False) -> Path:
    """Where one board's history lives for one profile (names checked as for a new file; with
    ``existing``, as for a board the fleet already holds, whose name an older version let
    through)."""
    profile_dir = check_name(profile, "profile name", existing=existing)
    return Path(logs_dir) / profile_dir / f"{check_name(serial, existing=existing)}.jsonl"


# --- writing ------------------------------------------------------------------------------


def _reason(exc: OSError) -> str:
    if exc.errno in (errno.ENOSPC, errno.EDQUOT):
        return "disk full"
    if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        return "read-only"
    if exc.errno in (errno.ENOTDIR, errno.EEXIST):
        return "a part of the path is a file, not a folder (read-only)"
    return exc.strerror or str(exc)


def _save_error(what: str, path: Path, exc: OSError) -> SaveError:
    kept = "the reading" if what == "reading" else f"the {what} record"
    return SaveError(
        f"could not save {what} to {path}: {_reason(exc)}; nothing was written, "
        f"{kept} is kept in memory"
    )


def _make_record(
    profile: str, serial: str, event: Event, stamp: str, session: str | None, record_id: str
) -> Record:
    if type(event) not in EVENT_TYPES.values():
        raise HistoryError(f"cannot store {type(event).__name__}: not a history event")
    if isinstance(event, SessionOpened):
        session = event.session_id  # an opening record names its own session
    return Record(
        schema=schema_for(event.kind),
        id=record_id,
        time=stamp,
        board=serial,
        profile=profile,
        kind=event.kind,
        fields=event_fields(event),
        session=session,
    )


def _store(path: Path, records: list[Record]) -> None:
    lines = [json.dumps(r.to_dict(), ensure_ascii=False, separators=(",", ":")) for r in records]
    try:
        with locked_file(path) as fd:
            new_file = os.fstat(fd).st_size == 0
            try:
                append_lines(fd, lines)
            except OSError:
                if new_file:
                    remove_if_empty(path, fd)  # no empty board file left behind a failure
                raise
            if new_file:
                fsync_dir(path.parent)
    except OSError as exc:
        if len(records) == 1:
            raise _save_error(records[0].kind, path, exc) from None
        raise SaveError(
            f"could not save {len(records)} records to {path}: {_reason(exc)}; nothing was "
            "written, all of them are kept in memory"
        ) from None


def append(
    logs_dir: Path | str,
    profile: str,
    serial: str,
    event: Event,
    *,
    time: datetime | None = None,
    record_id: str | None = None,
    session: str | None = None,
) -> Record:
    """Durably append one event to a board's history and return the stored record.

    Args:
        session: the id of the session the event belongs to (``SessionOpened.session_id``);
            pass it on every record so sessions from two terminals never mix.
    """
    profile, serial = check_name(profile, "profile name"), check_name(serial)
    path = board_path(logs_dir, profile, serial)
    stamp = format_time(time) if time else now_utc()
    record = _make_record(profile, serial, event, stamp, session, record_id or uuid.uuid4().hex)
    _store(path, [record])
    return record


def append_many(
    logs_dir: Path | str,
    profile: str,
    serial: str,
    events: Sequence[Event],
    *,
    time: datetime | None = None,
    session: str | None = None,
) -> tuple[Record, ...]:
    """Append several events with one write: all are saved or none is.

    Each record is stamped one microsecond after the one before, so they keep their order.
    Without ``session``, the session opened among ``events`` (if any) is used.
    """
    if not events:
        return ()
    profile, serial = check_name(profile, "profile name"), check_name(serial)
    path = board_path(logs_dir, profile, serial)
    if session is None:
        session = next((e.session_id for e in events if isinstance(e, SessionOpened)), None)
    start = time.astimezone(UTC) if time and time.tzinfo else (time or datetime.now(UTC))
    records = [
        _make_record(
            profile,
            serial,
            event,
            format_time(start + timedelta(microseconds=i)),
            session,
            uuid.uuid4().hex,
        )
        for i, event in enumerate(events)
    ]
    _store(path, records)
    return tuple(records)


# --- reading ------------------------------------------------------------------------------


def board_files(logs_dir: Path | str, serial: str) -> list[Path]:
    """Every history file for one serial, across profile folders."""
    name = f"{check_name(serial, existing=True)}.jsonl"
    root = Path(logs_dir)
    if not root.is_dir():
        return []
    found = []
    with os.scandir(root) as entries:
        for entry in entries:
            if entry.is_dir() and not entry.name.startswith("."):
                candidate = Path(entry.path) / name
                if candidate.is_file() and candidate.stat().st_size > 0:
                    found.append(candidate)  # an empty file (an old failed write) is no history
    return sorted(found)


def read_file(path: Path) -> tuple[list[tuple[Record, str]], list[Damaged]]:
    """All records and damaged lines of one history file."""
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise HistoryError(f"could not read {path}: {exc.strerror or exc}") from None
    return parse_lines(data, str(path))


def read_board(logs_dir: Path | str, serial: str) -> BoardHistory:
    """One board's whole history, found across profile folders, oldest first."""
    serial = check_name(serial, existing=True)
    files = board_files(logs_dir, serial)
    if not files:
        raise NotFoundError(f"no history for board {serial!r} in {logs_dir}")
    records: list[Record] = []
    damaged: list[Damaged] = []
    for path in files:
        found, bad = read_file(path)
        records.extend(r for r, _ in found)
        damaged.extend(bad)
    records.sort(key=lambda r: time_key(r.time))
    return BoardHistory(board=serial, events=tuple(records), damaged=tuple(damaged))
