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
    read_file,
    time_key,
)
from fieldtool.core.history_io import (
    append_lines,
    fsync_dir,
    locked_file,
    read_locked,
    rewrite,
)


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
        try:
            records, bad = read_file(path)
        except HistoryError as exc:
            skipped.append(exc.message)  # unreadable (permissions): the rest still merges
            continue
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
    damaged_lines = {d.line for d in bad}
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
        was_empty = not data
        append_lines(fd, [text for _, text in new])
        if was_empty:
            fsync_dir(target.parent)  # a new file: make its name durable too
    else:
        rewrite(target, _ordered_lines(data, damaged_lines, existing, new))
    return len(new), present, clashes


def _ordered_lines(
    data: bytes,
    damaged_lines: set[int],
    existing: list[tuple[Record, str]],
    new: list[tuple[Record, str]],
) -> list[str]:
    """All records ordered by time; damaged lines kept verbatim after the record before them.

    ``parse_lines`` makes every non-blank line either a record (in file order) or a damaged
    line (by number), so the n-th non-damaged line is ``existing[n]``.
    """
    leading: list[str] = []
    after: dict[int, list[str]] = {}
    index = -1
    for number, raw in enumerate(data.split(b"\n"), start=1):
        if not raw.strip():
            continue
        if number in damaged_lines:
            text = raw.decode("utf-8", "surrogateescape")  # bytes go back out unchanged
            (after.setdefault(index, []) if index >= 0 else leading).append(text)
        else:
            index += 1
    if index + 1 != len(existing):  # pragma: no cover - would mean parse_lines changed
        raise HistoryError("internal error: destination lines and records do not line up")
    tagged = [(time_key(r.time), i, text) for i, (r, text) in enumerate(existing)]
    tagged += [(time_key(r.time), len(existing) + j, text) for j, (r, text) in enumerate(new)]
    tagged.sort(key=lambda item: (item[0], item[1]))
    lines = list(leading)
    for _, i, text in tagged:
        lines.append(text)
        lines.extend(after.get(i, ()))
    return lines
