"""Per-board summaries for the fleet view, and a cache of them that cannot go stale.

The fleet view needs only a little from each board file: its sessions' outcomes and the
failures each repair confirmed. ``summarize_file`` reads that (skipping reading and diagnosis
lines unparsed, which it never needs). The cache ``<logs>/<profile>/.fleet-cache.json`` keeps
one summary per file together with the file's identity at the moment it was read: inode,
device, size, modification and change times in nanoseconds, taken with ``fstat`` on the open
file *before* its bytes are read. Every way the store changes a file moves one of those: an
append (or a crash mid-append) changes the size, a merge rewrite makes a new inode. A summary
is used only when all of them still match, so a stale entry is recomputed, never believed.
The cache is written like the history (temporary file, fsync, atomic rename); a crash leaves
the old cache or the new one, both safe. Its first line holds the format and a SHA-256 of the
rest; a damaged, foreign or older-format cache is ignored and rebuilt; a read-only folder
just means no cache is kept.
"""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import threading
from collections.abc import Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from fieldtool.core.history import Record, parse_record, time_key
from fieldtool.core.history.files import identity, read_with_identity, rewrite
from fieldtool.core.history.sessions import confirmed_in, group_sessions

CACHE_NAME = ".fleet-cache.json"
CACHE_FORMAT = 2  # bump when the summary's meaning changes: old caches are then ignored
_KIND = b'"kind":"'
SKIPPED_KINDS = ("reading", "diagnosis")  # kinds the fleet view never needs (also the store's)
_NOT_NEEDED = frozenset(k.encode() for k in SKIPPED_KINDS)


Repair = tuple[str, tuple[tuple[str, str, bool], ...]]  # (start, ((designator, mode, verified),))


@dataclass(frozen=True)
class BoardSummary:
    """What the fleet view needs from one board file.

    ``repairs`` lists the sessions closed ``fixed`` that confirmed failures, oldest first, as
    (start, ((designator, mode, verified), ...)); read from the cache they are JSON lists.
    """

    board: str
    outcomes: dict[str, int]  # fixed, not-fixed, escalated, open -> sessions
    repairs: Sequence[Repair]
    damaged: int  # unreadable lines among those the summary needed

    def to_json(self) -> dict[str, Any]:
        """A compact JSON form for the cache."""
        return {
            "board": self.board,
            "outcomes": self.outcomes,
            "repairs": self.repairs,
            "damaged": self.damaged,
        }

    @classmethod
    def from_json(cls, obj: dict[str, Any]) -> BoardSummary:
        """Rebuild from ``to_json`` output as read back from the (checksummed) cache."""
        if not isinstance(obj["repairs"], list) or not isinstance(obj["outcomes"], dict):
            raise ValueError("not a board summary")
        return cls(str(obj["board"]), obj["outcomes"], obj["repairs"], int(obj["damaged"]))


def _needed(line: bytes) -> bool:
    # A bare `"kind":"` can only be JSON structure, never text inside a string (quotes there
    # are escaped). A line is skipped unparsed only when its one and only kind is a reading or
    # a diagnosis; anything else, or any doubt, is parsed.
    at = line.find(_KIND)
    if at < 0:
        return True
    start = at + len(_KIND)
    end = line.find(b'"', start)
    if line[start:end] not in _NOT_NEEDED:
        return True
    return line.find(_KIND, end) >= 0


def summarize_bytes(board: str, data: bytes) -> BoardSummary:
    """The summary of one board file's content."""
    records: list[Record] = []
    damaged = 0
    for raw in data.split(b"\n"):
        if not raw.strip() or not _needed(raw):
            continue
        try:
            parsed = parse_record(raw.decode("utf-8"))
        except UnicodeDecodeError:
            damaged += 1
            continue
        if isinstance(parsed, str):
            damaged += 1
        else:
            records.append(parsed)
    records.sort(key=lambda r: time_key(r.time))
    outcomes: dict[str, int] = {}
    repairs = []
    for session in group_sessions(records):
        if session.id is None:
            continue
        outcome = session.outcome or "open"
        outcomes[outcome] = outcomes.get(outcome, 0) + 1
        found = confirmed_in(session)
        if found:
            failures = tuple((f.designator, f.mode, f.verified) for f in found)
            repairs.append((time_key(session.start), failures))
    return BoardSummary(board, outcomes, tuple(repairs), damaged)


def _board_files(folder: Path) -> Iterator[os.DirEntry[str]]:
    with os.scandir(folder) as entries:
        for entry in entries:
            if entry.name.endswith(".jsonl") and not entry.name.startswith("."):
                if entry.is_file() and entry.stat().st_size > 0:  # empty: no board yet
                    yield entry


def _load_cache(folder: Path) -> dict[str, Any]:
    try:
        raw = (folder / CACHE_NAME).read_bytes()
        head, _, payload = raw.partition(b"\n")
        payload = payload.removesuffix(b"\n")  # the store's writer ends every line

        header = json.loads(head)
        if not isinstance(header, dict) or header.get("format") != CACHE_FORMAT:
            return {}
        if header.get("sha256") != hashlib.sha256(payload).hexdigest():
            return {}  # damaged on disk (the rename is atomic, so not by us): rebuild
        files = json.loads(payload)
    except (OSError, ValueError):
        return {}
    return files if isinstance(files, dict) else {}


def _cached(entry: Any, identity: list[int]) -> BoardSummary | None:
    if not isinstance(entry, dict) or entry.get("identity") != identity:
        return None
    try:
        return BoardSummary.from_json(entry["summary"])
    except (KeyError, TypeError, ValueError):
        return None  # a damaged entry: read the file again


PARALLEL_FILES = 200  # from this many files to read, the summaries use every core


def _summarize_path(path: str) -> tuple[list[int], BoardSummary] | None:
    """Read and summarise one board file (runs in a worker too); None if it is unreadable."""
    try:
        identity, data = read_with_identity(Path(path))
    except OSError:
        return None  # vanished or unreadable: `history` on that board says why
    return identity, summarize_bytes(Path(path).name[: -len(".jsonl")], data)


def _summarize_all(paths: list[str]) -> list[tuple[list[int], BoardSummary] | None]:
    can_fork = "fork" in multiprocessing.get_all_start_methods()
    cores = min(os.cpu_count() or 1, 4)
    if len(paths) < PARALLEL_FILES or cores < 2 or not can_fork or threading.active_count() > 1:
        return [_summarize_path(p) for p in paths]
    # forked workers (see history_merge.merge): only from a process with no other thread
    with ProcessPoolExecutor(cores, mp_context=multiprocessing.get_context("fork")) as pool:
        return list(pool.map(_summarize_path, paths, chunksize=64))


def summaries(folder: Path, *, use_cache: bool = True) -> list[BoardSummary]:
    """Summaries of every board file in one profile folder, from the cache where it is valid."""
    cache = _load_cache(folder) if use_cache else {}
    found: dict[str, BoardSummary] = {}
    fresh: dict[str, Any] = {}
    stale: list[str] = []
    for entry in _board_files(folder):
        summary = _cached(cache.get(entry.name), identity(entry.stat()))
        if summary is None:
            stale.append(entry.path)
        else:
            found[entry.name] = summary
            fresh[entry.name] = cache[entry.name]
    for path, result in zip(stale, _summarize_all(stale), strict=True):
        if result is not None:
            read_as, summary = result
            name = Path(path).name
            found[name] = summary
            fresh[name] = {"identity": read_as, "summary": summary.to_json()}
    if use_cache and (stale or len(fresh) != len(cache)):
        _save_cache(folder, fresh)
    return [found[name] for name in sorted(found)]


def _save_cache(folder: Path, files: dict[str, Any]) -> None:
    payload = json.dumps(files, separators=(",", ":")).encode("utf-8")
    header = {"format": CACHE_FORMAT, "sha256": hashlib.sha256(payload).hexdigest()}
    try:
        rewrite(folder / CACHE_NAME, [json.dumps(header).encode("utf-8"), payload])
    except OSError:
        pass  # a read-only or full logs folder: the view is still right, only slower next time
