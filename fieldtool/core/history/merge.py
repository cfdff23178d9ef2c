"""Merge one logs folder into another: a union of records by id that never drops one.

Typical use: a technician's laptop folder merged into the workshop's. Merging twice changes
nothing. A record whose id is already present with different content is a conflict: both
versions are kept and the conflict is reported, so nothing is lost or silently chosen.

Lines are copied byte for byte, never re-serialised. A source line already present byte for
byte is not parsed again; every other source line is parsed and only whole, valid records are
merged (damaged ones are reported and left in the source). When every new record is later
than the destination's latest, they are appended under the board's lock; otherwise the file is
rewritten in time order through a temporary file and an atomic rename, with each damaged
destination line kept verbatim after the record it followed.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import re
import threading
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path

from fieldtool.core.history import (
    BadNameError,
    Damaged,
    HistoryError,
    check_name,
    record_id_time,
    time_key,
)
from fieldtool.core.history.files import append_lines, fsync_dir, locked_file, read_locked, rewrite
from fieldtool.core.words import count


@dataclass(frozen=True)
class Conflict:
    """One record id present in both folders with different content."""

    board: str
    profile: str
    id: str


@dataclass(frozen=True)
class MergeReport:
    """What a merge did: records added, already present, conflicts and unreadable lines."""

    added: int
    already_present: int
    boards: int
    conflicts: tuple[Conflict, ...]
    damaged: tuple[Damaged, ...]
    skipped: tuple[str, ...]


def _canonical(text: str) -> str:
    return json.dumps(json.loads(text), sort_keys=True, separators=(",", ":"))


def source_files(src: Path) -> list[tuple[str, str, Path]]:
    """Every board file of a logs folder as (profile folder, serial, path), sorted."""
    try:
        folders = sorted(p for p in src.iterdir() if p.is_dir() and not p.name.startswith("."))
    except OSError as exc:
        raise HistoryError(f"cannot read {src}: {exc.strerror or exc}") from None
    if not folders and any(src.glob("*.jsonl")):
        raise HistoryError(
            f"{src} holds board files directly: it looks like one profile's folder; "
            f"pass the logs folder above it ({src.parent})"
        )
    found = []
    for folder in folders:
        for path in sorted(folder.glob("*.jsonl")):
            if path.is_file():
                found.append((folder.name, path.stem, path))
    return found


PARALLEL_FILES = 200  # from this many board files on, a merge uses every core


@dataclass(frozen=True)
class _Outcome:
    """What merging one board file did (sent back from a worker process)."""

    added: int = 0
    present: int = 0
    clashes: tuple[str, ...] = ()
    damaged: tuple[Damaged, ...] = ()
    skipped: str | None = None
    error: str | None = None


def _merge_file(job: tuple[str, str, str, str]) -> _Outcome:
    """Merge one source board file into its destination file (runs in a worker too)."""
    profile, serial, src_path, target_path = job
    path, target = Path(src_path), Path(target_path)
    try:
        check_name(profile, "profile name", existing=True)
        check_name(serial, existing=True)
        data = path.read_bytes()
    except BadNameError as exc:
        return _Outcome(skipped=f"{path}: {exc.message}")
    except OSError as exc:  # unreadable (permissions): the rest still merges
        return _Outcome(skipped=f"could not read {path}: {exc.strerror or exc}")
    source = _Source(data, str(path))
    if not target.exists() and not source.validate_all():
        return _Outcome(damaged=tuple(source.damaged))  # nothing readable: create nothing
    try:
        with locked_file(target) as fd:
            added, present, clashes = _merge_into(fd, target, source)
    except OSError as exc:
        return _Outcome(damaged=tuple(source.damaged), error=f"{target}: {exc.strerror or exc}")
    return _Outcome(added, present, tuple(clashes), tuple(source.damaged))


def merge(src_dir: Path | str, dst_dir: Path | str, *, workers: int | None = None) -> MergeReport:
    """Merge every board history in ``src_dir`` into ``dst_dir``; idempotent.

    Args:
        workers: processes to use; None uses up to four cores for large merges; 1 works in
            this process. Extra processes are used only where the caller has no other thread.
    """
    src, dst = Path(src_dir), Path(dst_dir)
    if not src.is_dir():
        raise HistoryError(f"cannot merge from {src}: not a folder")
    if dst.exists() and src.resolve() == dst.resolve():
        raise HistoryError(f"cannot merge {src} into itself")
    jobs = [
        (profile, serial, str(path), str(dst / profile / path.name))
        for profile, serial, path in source_files(src)
    ]
    cores = os.cpu_count() or 1
    if workers is None:
        workers = min(cores, 4) if len(jobs) >= PARALLEL_FILES else 1
    # Workers are forked (no re-import of the caller's main module), and only from a process
    # with no other thread, since a fork copies other threads' locks in whatever state.
    can_fork = "fork" in multiprocessing.get_all_start_methods()
    if workers > 1 and len(jobs) > 1 and can_fork and threading.active_count() == 1:
        context = multiprocessing.get_context("fork")
        with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
            outcomes = list(pool.map(_merge_file, jobs, chunksize=32))
    else:
        outcomes = [_merge_file(job) for job in jobs]
    conflicts = tuple(
        Conflict(serial, profile, rid)
        for (profile, serial, _, _), outcome in zip(jobs, outcomes, strict=True)
        for rid in outcome.clashes
    )
    added = sum(o.added for o in outcomes)
    failed = [o.error for o in outcomes if o.error]
    if failed:
        others = f"; {count(len(failed) - 1, 'other file')} failed too" if len(failed) > 1 else ""
        raise HistoryError(
            f"could not merge into {failed[0]}; that file is unchanged{others} "
            f"({added} records were merged into other files)"
        )
    return MergeReport(
        added=added,
        already_present=sum(o.present for o in outcomes),
        boards=sum(1 for o in outcomes if o.added or o.present),
        conflicts=conflicts,
        damaged=tuple(d for o in outcomes for d in o.damaged),
        skipped=tuple(o.skipped for o in outcomes if o.skipped),
    )


# The store writes every record starting with schema, id and time, in that order, with no
# escapes in them; reading those from the line's start is enough to place and match a
# destination line (the full parse is kept for lines that do not start that way).
_PREFIX = re.compile(rb'\{"schema":\d+,"id":"([^"\\]+)","time":"([^"\\]+)"')


class _Source:
    """One source file's lines; each is validated (parsed) only if it is not already there."""

    def __init__(self, data: bytes, path: str) -> None:
        self.path = path
        lines = data.split(b"\n")
        self.torn_last = len(lines) if lines[-1] else 0
        self.lines = [(n, raw) for n, raw in enumerate(lines, start=1) if raw.strip()]
        self.damaged: list[Damaged] = []
        self._checked: dict[int, tuple[str, str] | None] = {}

    def record(self, number: int, raw: bytes) -> tuple[str, str] | None:
        """The line's record (id, time), or None (then it is listed as damaged)."""
        if number in self._checked:
            return self._checked[number]
        try:
            found: tuple[str, str] | str = record_id_time(raw.decode("utf-8"))
        except UnicodeDecodeError:
            found = "not UTF-8"
        if isinstance(found, str):
            reason = "torn last line (no newline)" if number == self.torn_last else found
            text = raw.decode("utf-8", "replace")
            self.damaged.append(Damaged(self.path, number, reason, text))
            self._checked[number] = None
            return None
        self._checked[number] = found
        return found

    def validate_all(self) -> bool:
        """Check every line; True when at least one is a record."""
        return sum(self.record(n, raw) is not None for n, raw in self.lines) > 0


def _sort_key(stamp: bytes) -> bytes:
    """A line's time as a sort key (the store's own spelling is already one)."""
    if len(stamp) == 27 and stamp.endswith(b"Z"):
        return stamp
    return time_key(stamp.decode("utf-8", "replace")).encode("utf-8")


class _Destination:
    """The destination file's lines; ids and times are read only when a new line needs them."""

    def __init__(self, data: bytes) -> None:
        self.lines = [raw for raw in data.split(b"\n") if raw.strip()]
        self.raw = set(self.lines)
        self.ids: dict[bytes, list[bytes]] = {}
        self.records: list[bytes] = []  # destination records, in file order
        self.keys: list[bytes] = []  # their sort keys
        self.after: dict[int, list[bytes]] = {}  # damaged lines kept after record i (-1: first)
        self.latest = b""
        self._indexed = False

    def index(self) -> None:
        """Read every destination line's id and time (once)."""
        if self._indexed:
            return
        self._indexed = True
        match, ids, records, keys = _PREFIX.match, self.ids, self.records, self.keys
        for raw in self.lines:
            found = match(raw)
            if found is not None:
                rid, stamp = found.group(1), found.group(2)
            else:
                try:
                    checked = record_id_time(raw.decode("utf-8"))
                except UnicodeDecodeError:
                    checked = "not UTF-8"
                if isinstance(checked, str):
                    self.after.setdefault(len(records) - 1, []).append(raw)
                    continue
                rid, stamp = checked[0].encode("utf-8"), checked[1].encode("utf-8")
            ids.setdefault(rid, []).append(raw)
            records.append(raw)
            keys.append(_sort_key(stamp))
        self.latest = max(keys, default=b"")

    def add(self, rid: bytes, raw: bytes) -> None:
        """Take a new line in (kept in memory until written)."""
        self.raw.add(raw)
        self.ids.setdefault(rid, []).append(raw)

    def ordered(self, new: list[tuple[bytes, bytes]]) -> list[bytes]:
        """Every line, records ordered by time; damaged ones after the record they followed."""
        n = len(self.records)
        lines = self.records + [raw for _, raw in new]
        keys = self.keys + [key for key, _ in new]
        out = list(self.after.get(-1, ()))
        for i in sorted(range(len(lines)), key=keys.__getitem__):  # stable: ties keep order
            out.append(lines[i])
            if i < n and i in self.after:
                out.extend(self.after[i])
        return out


def same_record(a: bytes, b: bytes) -> bool:
    """True when two lines hold the same record (the same JSON, however spelled)."""
    try:
        return _canonical(a.decode("utf-8")) == _canonical(b.decode("utf-8"))
    except ValueError:  # a damaged destination line can equal nothing
        return False


def _merge_into(fd: int, target: Path, source: _Source) -> tuple[int, int, list[str]]:
    """Merge a source file into one locked destination file; return (added, present, conflicts)."""
    data = read_locked(fd)
    dst = _Destination(data)
    new: list[tuple[bytes, bytes]] = []
    present = 0
    clashes: list[str] = []
    for number, raw in source.lines:
        if raw in dst.raw:
            present += 1  # byte for byte already there
            continue
        found = source.record(number, raw)
        if found is None:
            continue
        dst.index()
        rid, key = found[0].encode("utf-8"), _sort_key(found[1].encode("utf-8"))
        versions = dst.ids.get(rid)
        if versions and any(same_record(raw, v) for v in versions):
            present += 1  # the same record, spelled differently
            continue
        if versions:
            clashes.append(found[0])
        dst.add(rid, raw)
        new.append((key, raw))
    if not new:
        return 0, present, clashes
    new.sort(key=lambda pair: pair[0])
    if all(key >= dst.latest for key, _ in new):
        append_lines(fd, [raw for _, raw in new])
        if not data:
            fsync_dir(target.parent)  # a new file: make its name durable too
    else:
        rewrite(target, dst.ordered(new))
    return len(new), present, clashes
