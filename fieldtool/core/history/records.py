"""History records: the stored line's envelope and parsing a line.

Each record carries the ``schema`` its kind was written with (``events.schema_for``): a
reading or verification is schema 2 (a whole ``Measurement``), every other kind schema 1. A
record of a higher schema than this version knows for its kind is kept and shown as it is,
never read as an event. Re-exported by ``fieldtool.core.history``; import them from there.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from fieldtool.core.history.events import Event, SessionOpened, event_from_fields, schema_for

_BASE_KEYS = ("schema", "id", "time", "board", "profile", "kind")

# --- records ------------------------------------------------------------------------------


@dataclass(frozen=True)
class Record:
    """One stored line: the common envelope plus the kind's own fields."""

    schema: int
    id: str
    time: str
    board: str
    profile: str
    kind: str
    fields: dict[str, Any]
    newer_schema: bool = False
    session: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """The record as it is stored, unknown fields included."""
        base = {k: getattr(self, k) for k in _BASE_KEYS}
        if self.session is not None:
            base["session"] = self.session
        return {**base, **self.fields}

    @property
    def session_id(self) -> str | None:
        """The session this record belongs to, if it says (an opening record always does)."""
        if self.session is not None:
            return self.session
        if self.kind == SessionOpened.kind:
            sid = self.fields.get("session_id")
            return sid if isinstance(sid, str) and sid else None
        return None

    @property
    def event(self) -> Event | None:
        """The typed event, or None for a kind or schema this tool does not know."""
        if self.newer_schema:
            return None
        return event_from_fields(self.kind, self.fields, self.schema)


@dataclass(frozen=True)
class Damaged:
    """A line that is not a readable record, left on disk as it is."""

    path: str
    line: int
    reason: str
    text: str


@dataclass(frozen=True)
class BoardHistory:
    """Every readable record of one board, oldest first, and the lines that were not."""

    board: str
    events: tuple[Record, ...]
    damaged: tuple[Damaged, ...]


_DECODER = json.JSONDecoder()


def loads_line(text: str) -> Any:
    """``json.loads`` of one line (same results and errors), quicker on the usual line."""
    try:
        obj, end = _DECODER.raw_decode(text)
    except ValueError:
        return json.loads(text)  # e.g. leading whitespace: json.loads decides (and raises)
    if end != len(text) and text[end:].strip(" \t\n\r"):
        raise ValueError("extra data after the JSON value")
    return obj


def _envelope_problem(obj: Any) -> str | None:
    """Why a parsed JSON value is not a record, or None when it is one."""
    if not isinstance(obj, dict):
        return "not a JSON object"
    schema = obj.get("schema")
    if not isinstance(schema, int) or isinstance(schema, bool):
        return "no schema version"
    for key in ("id", "time", "kind"):
        value = obj.get(key)
        if not isinstance(value, str) or not value:
            return f"missing {key}"
    return None


def parse_object(text: str) -> dict[str, Any] | str:
    """One line as a JSON object whose envelope is a record's, or the reason it is not one."""
    try:
        obj = loads_line(text)
    except ValueError:
        return "not valid JSON (torn or corrupted line)"
    problem = _envelope_problem(obj)
    return problem if problem else obj


def record_id_time(text: str) -> tuple[str, str] | str:
    """A line's record id and time (checked exactly as ``parse_record`` does), or the reason."""
    obj = parse_object(text)
    return obj if isinstance(obj, str) else (obj["id"], obj["time"])


def parse_record(text: str) -> Record | str:
    """One JSON line as a Record, or the reason it is not one."""
    obj = parse_object(text)
    if isinstance(obj, str):
        return obj
    schema, rid, stamp, kind = obj.pop("schema"), obj.pop("id"), obj.pop("time"), obj.pop("kind")
    session = obj.get("session")
    if isinstance(session, str) and session:
        del obj["session"]
    else:
        session = None  # absent, or a shape this version does not know: kept in fields
    board, profile = obj.pop("board", ""), obj.pop("profile", "")
    return Record(
        schema=schema,
        id=rid,
        time=stamp,
        board=board if isinstance(board, str) else str(board),
        profile=profile if isinstance(profile, str) else str(profile),
        kind=kind,
        fields=obj,
        newer_schema=schema > schema_for(kind),
        session=session,
    )


def parse_lines(
    data: bytes, path: str, parse: Callable[[str], Any] = parse_record
) -> tuple[list[tuple[Any, str]], list[Damaged]]:
    """Split file bytes into (record, raw line) pairs and damaged lines.

    Args:
        parse: how a line becomes a record (``parse_record``, or ``parse_object`` for the
            JSON object alone); it returns the reason as a string for a line that is not one.
    """
    records: list[tuple[Any, str]] = []
    damaged: list[Damaged] = []
    lines = data.split(b"\n")
    torn_tail = bool(lines[-1])
    for number, raw in enumerate(lines, start=1):
        if not raw.strip():
            continue
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError:
            damaged.append(Damaged(path, number, "not UTF-8", raw.decode("utf-8", "replace")))
            continue
        parsed = parse(text)
        if not isinstance(parsed, str):
            records.append((parsed, text))
        else:
            last = number == len(lines) and torn_tail
            reason = "torn last line (no newline)" if last else parsed
            damaged.append(Damaged(path, number, reason, text))
    return records, damaged
