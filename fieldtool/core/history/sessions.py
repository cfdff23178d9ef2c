"""Sessions: a board's records grouped into the visits they belong to, and what they confirm.

A record names its session (``Record.session_id``). Records written before that field existed
carry none; they belong to the latest opening record before them that has not been closed yet
(by position in time), which is right as long as one terminal wrote the board at a time.

A failure is *confirmed* when an action names a part (or a board target) and a catalogued
failure mode for it, in a session whose outcome is ``fixed``: the technician found that part
failed that way, acted on it, and the board then worked. It is *verified* as well when the
same session holds a verification reading taken at or after that action.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from fieldtool.core.diagnosis.faults import BOARD_TARGETS, MODES
from fieldtool.core.history import Record, SessionClosed, SessionOpened, time_key

PART_MODES = frozenset(m.name for m in MODES if m.applies_to in ("diode", "capacitor"))
TARGET_MODES = {t: frozenset(m.name for m in MODES if m.applies_to == t) for t in BOARD_TARGETS}


@dataclass(frozen=True)
class Session:
    """One visit to a board: its records oldest first (``id`` None for stray records)."""

    id: str | None
    records: tuple[Record, ...]

    @property
    def opened(self) -> Record | None:
        """The opening record, if it is in the history."""
        return next((r for r in self.records if r.kind == SessionOpened.kind), None)

    @property
    def closed(self) -> Record | None:
        """The last closing record (a session closed twice keeps its later outcome)."""
        return next((r for r in reversed(self.records) if r.kind == SessionClosed.kind), None)

    @property
    def outcome(self) -> str | None:
        """``fixed``, ``not-fixed``, ``escalated``, or None while the session is open."""
        closed = self.closed
        outcome = closed.fields.get("outcome") if closed else None
        return outcome if isinstance(outcome, str) else None

    @property
    def start(self) -> str:
        """When the session was opened (or its first record, if the opening is missing)."""
        opened = self.opened
        return (opened or self.records[0]).time

    @property
    def profile(self) -> str:
        """The profile name the session was recorded under."""
        return (self.opened or self.records[0]).profile

    def of_kind(self, kind: str) -> list[Record]:
        """The session's records of one kind, oldest first."""
        return [r for r in self.records if r.kind == kind]


@dataclass(frozen=True)
class ConfirmedFailure:
    """A part (or board target) found failed in a session that ended fixed."""

    designator: str
    mode: str
    time: str
    verified: bool


def group_sessions(records: Iterable[Record]) -> tuple[Session, ...]:
    """Group records (oldest first) into sessions, ordered by when each started."""
    groups: dict[str | None, list[Record]] = {}
    positional: str | None = None  # the open session that id-less records belong to
    for record in records:
        sid = record.session_id
        if record.session is None:  # written before records named their session
            if record.kind == SessionOpened.kind:
                sid = sid or f"legacy-{record.id}"
                positional = sid
            else:
                sid = positional
                if record.kind == SessionClosed.kind:
                    positional = None
        groups.setdefault(sid, []).append(record)
    sessions = [Session(sid, tuple(recs)) for sid, recs in groups.items()]
    return tuple(sorted(sessions, key=lambda s: (s.id is not None, time_key(s.start))))


def is_catalogued(designator: str, mode: str) -> bool:
    """True when ``mode`` is a catalogued failure mode for that kind of target."""
    if designator in TARGET_MODES:
        return mode in TARGET_MODES[designator]
    return mode in PART_MODES  # renamed designators (CR105) do not say diode or capacitor


def confirmed_in(session: Session) -> tuple[ConfirmedFailure, ...]:
    """The failures a session confirms (see module docstring); one per part and mode."""
    if session.id is None or session.outcome != "fixed":
        return ()
    checks = [time_key(r.time) for r in session.of_kind("verification")]
    found: dict[tuple[str, str], ConfirmedFailure] = {}
    for record in session.of_kind("action"):
        designator, mode = record.fields.get("designator"), record.fields.get("mode")
        if not isinstance(designator, str) or not isinstance(mode, str):
            continue
        designator, mode = designator.strip(), mode.strip()
        if not designator or not is_catalogued(designator, mode) or record.newer_schema:
            continue
        verified = any(t >= time_key(record.time) for t in checks)
        key = (designator, mode)
        if key not in found or (verified and not found[key].verified):
            found[key] = ConfirmedFailure(designator, mode, record.time, verified)
    return tuple(found.values())


def open_session(sessions: Sequence[Session]) -> Session | None:
    """The latest session still open, if any."""
    for session in reversed(sessions):
        if session.id is not None and session.closed is None:
            return session
    return None
