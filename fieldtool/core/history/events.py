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
    """A node voltage measured during diagnosis; ``volts`` is None on overload."""

    kind: ClassVar[str] = "reading"
    node: str
    volts: float | None
    unit: str = "V"
    source: str = "typed"
    spread: float | None = None
    overload: bool = False
    ripple_vpp: float | None = None

    def __post_init__(self) -> None:
        _check_measurement(self)


@dataclass(frozen=True)
class Verification(Reading):
    """A node voltage measured after a repair to confirm it (same fields as a reading)."""

    kind: ClassVar[str] = "verification"


@dataclass(frozen=True)
class Suspect:
    """One ranked suspect: a part, how it failed, and its probability."""

    designator: str
    mode: str
    probability: float


@dataclass(frozen=True)
class Diagnosis:
    """The top suspects the engine ranked from the readings so far."""

    kind: ClassVar[str] = "diagnosis"
    suspects: tuple[Suspect, ...]


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


Event = SessionOpened | Reading | Verification | Diagnosis | Action | SessionClosed
EVENT_TYPES: dict[str, type] = {
    t.kind: t for t in (SessionOpened, Reading, Verification, Diagnosis, Action, SessionClosed)
}


def _check_measurement(m: Reading) -> None:
    if m.volts is None and not m.overload:
        raise HistoryError(f"{m.kind} at {m.node}: no volts given and not marked overload")
    if m.volts is not None and not math.isfinite(m.volts):
        raise HistoryError(f"{m.kind} at {m.node}: volts must be a finite number")
    if m.ripple_vpp is not None and not (math.isfinite(m.ripple_vpp) and m.ripple_vpp >= 0):
        raise HistoryError(f"{m.kind} at {m.node}: ripple must be a finite number of volts >= 0")


def event_fields(event: Event) -> dict[str, Any]:
    """The JSON fields an event contributes to its record."""
    return dataclasses.asdict(event)


def event_from_fields(kind: str, fields: Mapping[str, Any]) -> Event | None:
    """Rebuild an event from stored fields, or None if the kind or fields are unknown."""
    cls = EVENT_TYPES.get(kind)
    if cls is None:
        return None
    names = {f.name for f in dataclasses.fields(cls)}
    args = {k: v for k, v in fields.items() if k in names}
    if cls is Diagnosis:
        args["suspects"] = tuple(Suspect(**s) for s in args.get("suspects", ()))
    try:
        return cls(**args)
    except (TypeError, HistoryError):
        return None
