"""What the store keeps of one history line: the line itself, and the columns queries use.

The line is stored whole, exactly as it is in the board's file. Beside it, a few values read
from it become columns (``COLUMNS``), so the fleet view and a board's history are queries
rather than a scan. A text column holds its value as the body of a JSON string (the value
itself unless it has a quote, a backslash or a character that is not printable, some of which
PostgreSQL text cannot hold: a NUL, say): one value, one spelling, so equal values stay equal.

Rows travel as PostgreSQL's COPY text format, built here (``copy_line``).
"""

from __future__ import annotations

import json
import re
from datetime import UTC, datetime, timedelta
from typing import Any

from fieldtool.core.history import Action, SessionClosed, time_key
from fieldtool.core.history.fleet_cache import SKIPPED_KINDS

COLUMNS = (
    "id",
    "profile",  # the profile folder the line came from
    "board",  # the board file it came from (serial)
    "kind",
    "session",  # NULL for records written before records named their session
    "tk",  # the time as a sort key (history.time_key)
    "us",  # that time in microseconds since 1970 (NULL for readings, or an unreadable time)
    "schema_version",
    "designator",  # actions: the part, stripped; NULL when not a string
    "mode",  # actions: the failure mode, stripped; NULL when not a string
    "outcome",  # closings: the outcome; NULL when not a string
    "line",
)
_INT32 = 2**31 - 1
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_MICROSECOND = timedelta(microseconds=1)
_COPY_SPECIAL = re.compile(r"[\\\t\n\r]")
_COPY_ESCAPES = str.maketrans({"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"})


def to_column(value: str) -> str:
    """A text value as the store keeps it (see module docstring)."""
    if value.isprintable() and '"' not in value and "\\" not in value:
        return value
    try:
        body = json.dumps(value, ensure_ascii=False)
        body.encode("utf-8")
    except UnicodeEncodeError:  # a lone surrogate from a \\ud800 escape: all-ASCII spelling
        body = json.dumps(value, ensure_ascii=True)
    return body[1:-1]


def from_column(value: str) -> str:
    """The value a text column holds (the inverse of ``to_column``)."""
    return json.loads(f'"{value}"') if "\\" in value else value


def micros(stamp: str) -> int | None:
    """A stored time (``time_key`` form) as microseconds since 1970, as the fleet view reads
    it (a time without a zone is UTC); None when it is not a time."""
    try:
        moment = datetime.fromisoformat(stamp)
    except ValueError:
        return None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return (moment - _EPOCH) // _MICROSECOND


def cell(value: str) -> str:
    """A text value as a COPY text field of its column: ``to_column``, then COPY's escaping of
    backslashes (a column value never holds a tab or a line break: ``to_column`` escapes them).
    """
    if value.isalnum() or (value.isprintable() and '"' not in value and "\\" not in value):
        return value  # the usual case, checked quickly: kept as it is
    return to_column(value).replace("\\", "\\\\")


def _optional(value: Any, strip: bool = False) -> str:
    """A field that may be missing or not a string in the record: ``\\N`` (NULL) then."""
    if not isinstance(value, str):
        return "\\N"
    return cell(value.strip() if strip else value)


def copy_line(profile: str, board: str, obj: dict[str, Any], line: str) -> str:
    """One record as a COPY text row of ``COLUMNS``, newline included.

    Args:
        profile, board: already as COPY fields (``cell``).
        obj: the line's JSON object, its envelope checked (``history.parse_object``).
    """
    kind = obj["kind"]
    tk = time_key(obj["time"])
    session = obj.get("session")
    session = cell(session) if isinstance(session, str) and session else "\\N"
    designator = mode = outcome = "\\N"
    if kind == Action.kind:
        designator = _optional(obj.get("designator"), strip=True)
        mode = _optional(obj.get("mode"), strip=True)
    elif kind == SessionClosed.kind:
        outcome = _optional(obj.get("outcome"))
    us = None if kind in SKIPPED_KINDS else micros(tk)
    us = "\\N" if us is None else str(us)
    schema = max(-_INT32, min(_INT32, obj["schema"]))
    if _COPY_SPECIAL.search(line):
        line = line.translate(_COPY_ESCAPES)
    return (
        f"{cell(obj['id'])}\t{profile}\t{board}\t{cell(kind)}\t{session}\t{cell(tk)}\t{us}\t"
        f"{schema}\t{designator}\t{mode}\t{outcome}\t{line}\n"
    )
