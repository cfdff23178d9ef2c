"""History events and errors: what a board's history records, as frozen dataclasses.

Re-exported by ``fieldtool.core.history``; import them from there.
"""

from __future__ import annotations

import dataclasses
import math
import uuid
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, ClassVar

from fieldtool.core.errors import FieldtoolError
from fieldtool.core.measurement import DC, Measurement, Source

OUTCOMES = ("fixed", "not-fixed", "escalated")


class HistoryError(FieldtoolError):
    """A board history that cannot be read or written."""

    title = "History"


class BadNameError(HistoryError):
    """A board serial or profile name that is unsafe as a file name."""

    title = "Bad board serial"


class SaveError(HistoryError):
    """A record that could not be saved; nothing was written."""

    title = "History not saved"


class NotFoundError(HistoryError):
    """No history exists for the board or profile asked for."""

    title = "No history"


# --- events -------------------------------------------------------------------------------


@dataclass(frozen=True)
class SessionOpened:
    """A technician starts working on a board."""

    kind: ClassVar[str] = "session-opened"
    technician: str
    profile_hash: str
    tool_version: str
    session_id: str = field(default_factory=lambda: uuid.uuid4().hex)
    ambient_c: float | None = None


@dataclass(frozen=True)
class Reading:
    """A measurement taken while finding the fault."""

    kind: ClassVar[str] = "reading"
    measurement: Measurement

    def __post_init__(self) -> None:
        if self.measurement.at is None:
            raise HistoryError(f"a {self.kind} record needs the place it was taken at")


@dataclass(frozen=True)
class Verification(Reading):
    """A measurement taken after a repair to confirm it (same fields as a reading)."""

    kind: ClassVar[str] = "verification"


@dataclass(frozen=True)
class SnapshotSuspect:
    """One suspect as a diagnosis snapshot keeps it: the part ("" for none), mode, odds."""

    designator: str
    mode: str
    probability: float


@dataclass(frozen=True)
class DiagnosisSnapshot:
    """The top suspects the engine ranked from the readings so far, as saved with a repair."""

    kind: ClassVar[str] = "diagnosis"
    suspects: tuple[SnapshotSuspect, ...]


@dataclass(frozen=True)
class Action:
    """Something done to one part: replaced, resoldered, cleaned."""

    kind: ClassVar[str] = "action"
    designator: str
    done: str
    mode: str | None = None
    part_used: str | None = None
    note: str = ""


@dataclass(frozen=True)
class SessionClosed:
    """The session ends with an outcome: fixed, not-fixed or escalated."""

    kind: ClassVar[str] = "session-closed"
    outcome: str

    def __post_init__(self) -> None:
        if self.outcome not in OUTCOMES:
            raise HistoryError(
                f"unknown outcome {self.outcome!r}; use one of {', '.join(OUTCOMES)}"
            )


Event = SessionOpened | Reading | Verification | DiagnosisSnapshot | Action | SessionClosed
EVENT_TYPES: dict[str, type] = {
    t.kind: t
    for t in (SessionOpened, Reading, Verification, DiagnosisSnapshot, Action, SessionClosed)
}
# The record schema each kind is written with (see records.py). Readings and verifications
# carry a whole Measurement since schema 2; the other kinds are unchanged since schema 1, so
# older tools still read them.
SCHEMAS: dict[str, int] = {Reading.kind: 2, Verification.kind: 2}
UNSETTLED = " (unsettled)"  # how schema 1 marked a value taken before it settled


def schema_for(kind: str) -> int:
    """The schema this version writes (and reads up to) for records of one kind."""
    return SCHEMAS.get(kind, 1)


def measurement_from_v1(fields: Mapping[str, Any]) -> Measurement:
    """A schema-1 reading's fields (node, volts, source, spread, overload) as a Measurement.

    Schema 1 marked a value taken before it settled by appending " (unsettled)" to the
    source, and named a source by text: ``typed``, ``file NAME`` or the meter's identity.
    Its ``ripple_vpp`` is not part of the measurement (it stays in the record's fields).
    """
    node, volts, overload = fields.get("node"), fields.get("volts"), fields.get("overload")
    if not isinstance(node, str) or not node:
        raise HistoryError(f"a schema-1 reading names no node ({node!r})")
    if volts is None and not overload:
        raise HistoryError(f"reading at {node}: no volts given and not marked overload")
    text = fields.get("source", "typed")
    text = text if isinstance(text, str) else str(text)
    settled = not text.endswith(UNSETTLED)
    text = text.removesuffix(UNSETTLED)
    if text == "typed":
        source = Source("typed")
    elif text.startswith("file "):
        source = Source("file", text.removeprefix("file "))
    else:
        source = Source("meter", text)
    return Measurement(
        node,
        DC,
        None if overload else volts,
        source,
        spread=fields.get("spread"),
        settled=settled,
    )


def event_fields(event: Event) -> dict[str, Any]:
    """The JSON fields an event contributes to its record."""
    if isinstance(event, Reading):
        return event.measurement.to_fields()
    return dataclasses.asdict(event)


def event_from_fields(kind: str, fields: Mapping[str, Any], schema: int = 1) -> Event | None:
    """Rebuild an event from stored fields, or None if the kind or fields are unknown."""
    cls = EVENT_TYPES.get(kind)
    if cls is None:
        return None
    try:
        if issubclass(cls, Reading):
            if schema >= 2:
                return cls(Measurement.from_fields(fields))
            return cls(measurement_from_v1(fields))
        names = {f.name for f in dataclasses.fields(cls)}
        args = {k: v for k, v in fields.items() if k in names}
        if cls is DiagnosisSnapshot:
            suspects = args.get("suspects", ())
            if not isinstance(suspects, list | tuple):
                return None
            args["suspects"] = tuple(_typed(SnapshotSuspect, s) for s in suspects)
        return _typed(cls, args)
    except (TypeError, FieldtoolError):
        return None


_PLAIN = {"str": str, "float": float, "int": int, "bool": bool, "None": type(None)}


def _typed(cls: type, args: Any) -> Any:
    """``cls(**args)`` when every plain field (``str``, ``float``, ``X | None``) holds its type
    and every number is finite; TypeError otherwise. What an older or foreign writer stored
    (a list for a designator, a string for a probability, NaN) becomes an unreadable record,
    shown as such, rather than a value that breaks a screen, a report or the fleet view later.
    """
    if not isinstance(args, Mapping):
        raise TypeError(f"{cls.__name__}: not a table")
    args = dict(args)
    for f in dataclasses.fields(cls):
        if f.name not in args:
            continue
        allowed = [_PLAIN.get(t.strip()) for t in str(f.type).split("|")]
        if None in allowed:  # a structured field (a tuple of suspects): built by the caller
            continue
        value = args[f.name]
        if isinstance(value, bool) and bool not in allowed:
            raise TypeError(f"{cls.__name__}.{f.name}: {value!r}")
        if isinstance(value, int) and float in allowed and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, tuple(allowed)):
            raise TypeError(f"{cls.__name__}.{f.name}: {value!r}")
        if isinstance(value, float) and not math.isfinite(value):
            raise TypeError(f"{cls.__name__}.{f.name}: {value!r}")
        args[f.name] = value
    return cls(**args)
