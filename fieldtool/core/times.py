"""Time stamps as the tool stores them: UTC, ISO 8601, microseconds, a ``Z`` suffix."""

from __future__ import annotations

from datetime import UTC, datetime


def now_utc() -> str:
    """The current UTC time as ISO 8601 with a Z suffix."""
    return format_time(datetime.now(UTC))


def format_time(moment: datetime) -> str:
    """A datetime as UTC ISO 8601 with microseconds and a Z suffix."""
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def time_key(stamp: str) -> str:
    """A sort key for a stored time; other ISO 8601 spellings are normalised to ours."""
    if len(stamp) == 27 and stamp[-1] == "Z":
        return stamp
    try:
        return format_time(datetime.fromisoformat(stamp))
    except ValueError:
        return stamp
