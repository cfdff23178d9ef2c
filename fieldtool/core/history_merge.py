"""Merge one logs folder into another: a union of records by id that never drops one.

Typical use: a technician's laptop folder merged into the workshop's. Merging twice changes
nothing. A record whose id is already present with different content is a conflict: both
versions are kept and the conflict is reported, so nothing is lost or silently chosen.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from fieldtool.core.history import (
    BadNameError,
    Damaged,
    HistoryError,
    Record,
    check_name,
    parse_lines,
    parse_record,
    read_file,
    time_key,
)
from fieldtool.core.history_io import append_lines, locked_file, read_locked, rewrite


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


def _source_files(src: Path) -> list[tuple[str, str, Path]]:
    found = []
    for folder in sorted(p for p in src.iterdir() if p.is_dir()):
        for path in sorted(folder.glob("*.jsonl")):
            found.append((folder.name, path.stem, path))
    return found


def merge(src_dir: Path | str, dst_dir: Path | str) -> MergeReport:
    """Merge every board history in ``src_dir`` into ``dst_dir``; idempotent."""
    src, dst = Path(src_dir), Path(dst_dir)
    if not src.is_dir():
        raise HistoryError(f"cannot merge from {src}: not a folder")
    if dst.exists() and src.resolve() == dst.resolve():
        raise HistoryError(f"cannot merge {src} into itself")
    added = present = boards = 0
    conflicts: list[Conflict] = []
    damaged: list[Damaged] = []
    skipped: list[str] = []
    for profile, serial, path in _source_files(src):
        try:
            check_name(profile, "profile name")
            check_name(serial)
        except BadNameError as exc:
            skipped.append(f"{path}: {exc.message}")
            continue
        records, bad = read_file(path)
        damaged.extend(bad)
        if not records:
            continue
        boards += 1
        target = dst / profile / path.name
        try:
            with locked_file(target) as fd:
                n_added, n_present, clashes = _merge_into(fd, target, records)
        except OSError as exc:
            raise HistoryError(
                f"could not merge into {target}: {exc.strerror or exc}; that file is unchanged "
                f"({added} records were merged before it)"
            ) from None
        added += n_added
        present += n_present
        conflicts.extend(Conflict(serial, profile, rid) for rid in clashes)
    return MergeReport(added, present, boards, tuple(conflicts), tuple(damaged), tuple(skipped))


def _merge_into(
    fd: int, target: Path, incoming: list[tuple[Record, str]]
) -> tuple[int, int, list[str]]:
    """Merge records into one locked destination file; return (added, present, conflicts)."""
    data = read_locked(fd)
    existing, bad = parse_lines(data, str(target))
    seen: dict[str, set[str]] = {}
    for record, text in existing:
        seen.setdefault(record.id, set()).add(text)
    new: list[tuple[Record, str]] = []
    present = 0
    clashes: list[str] = []
    for record, text in incoming:
        versions = seen.get(record.id)
        if versions is None:
            seen[record.id] = {text}
            new.append((record, text))
            continue
        if text in versions or _canonical(text) in {_canonical(v) for v in versions}:
            present += 1
            continue
        versions.add(text)
        clashes.append(record.id)
        new.append((record, text))
    if not new:
        return 0, present, clashes
    latest = max((time_key(r.time) for r, _ in existing), default="")
    new.sort(key=lambda pair: time_key(pair[0].time))
    if not bad and all(time_key(r.time) >= latest for r, _ in new):
        append_lines(fd, [text for _, text in new])
    else:
        rewrite(target, _ordered_lines(data, existing + new))
    return len(new), present, clashes


def _ordered_lines(data: bytes, records: list[tuple[Record, str]]) -> list[str]:
    """All records ordered by time; damaged lines kept verbatim after the record before them."""
    after: dict[str | None, list[str]] = {}
    anchor: str | None = None
    for raw in data.split(b"\n"):
        if not raw.strip():
            continue
        text = raw.decode("utf-8", "surrogateescape")
        parsed_id = _record_id(text)
        if parsed_id is None:
            after.setdefault(anchor, []).append(text)
        else:
            anchor = parsed_id
    ordered = sorted(records, key=lambda pair: time_key(pair[0].time))
    lines = list(after.pop(None, []))
    for record, text in ordered:
        lines.append(text)
        lines.extend(after.pop(record.id, []))
    for rest in after.values():
        lines.extend(rest)
    return lines


def _record_id(text: str) -> str | None:
    parsed = parse_record(text)
    return parsed.id if isinstance(parsed, Record) else None
