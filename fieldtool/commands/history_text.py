"""Plain-text views for the history commands: a board's timeline and the fleet summary."""

from __future__ import annotations

import unicodedata
from collections.abc import Callable
from typing import Any

from fieldtool.core.history import (
    EVENT_TYPES,
    UNSETTLED,
    Action,
    BoardHistory,
    DiagnosisSnapshot,
    Reading,
    Record,
    SessionOpened,
    SnapshotSuspect,
    time_key,
)
from fieldtool.core.history.fleet import FleetView
from fieldtool.core.history.merge import MergeReport
from fieldtool.core.history.sessions import Session, confirmed_in
from fieldtool.core.measurement import DC, Measurement
from fieldtool.core.words import conditions_words, count

LIST_LIMIT = 15  # rows per list in text output; --json has them all


def safe(text: Any) -> str:
    """Text from a history file made harmless for a terminal (no escape sequences)."""
    return "".join(
        c if unicodedata.category(c) not in ("Cc", "Cf") else f"\\x{ord(c):02x}" for c in str(text)
    )


def when(stamp: str) -> str:
    """A stored time as ``2026-01-05 09:00`` (UTC)."""
    key = time_key(stamp)
    return f"{key[:10]} {key[11:16]}" if len(key) == 27 else safe(stamp)


def value_text(m: Measurement) -> str:
    """A measured value with its unit, or ``OL (over range)``."""
    return "OL (over range)" if m.value is None else f"{m.value:.4g} {m.unit}"


def _measurement_words(record: Record, m: Measurement) -> str:
    label = "reading" if record.kind == "reading" else "verification (after repair)"
    what = ("" if m.quantity == DC else f" {m.quantity.words}") + conditions_words(m.conditions)
    extra = f", spread {m.spread:.3g} {m.unit}" if m.spread is not None else ""
    ripple = record.fields.get("ripple_vpp")  # schema 1 kept a ripple beside the DC value
    if record.schema == 1 and isinstance(ripple, int | float):
        extra += f", ripple {ripple:.3g} V p-p"
    source = safe(m.source) + ("" if m.settled else UNSETTLED)
    return f"{label} {safe(m.at)}{what} = {value_text(m)} ({source}{extra})"


NOT_THIS_BOARD = " — not a reading of this board (wrong range or unit?)"


def describe(record: Record, beyond: Callable[[Measurement], bool] | None = None) -> str:
    """One record in a line of plain words; ``beyond`` says whether a reading is one no node of
    the board could show (an older version let such values through)."""
    kind = record.kind
    if record.newer_schema:
        return f"{safe(kind)} (from a newer fieldtool, schema {record.schema}; kept as is)"
    event = record.event
    if event is None:
        if kind in EVENT_TYPES:  # a known kind whose fields are not what this version wrote
            return f"{safe(kind)} (unreadable by this version; kept as is)"
        return safe(kind)
    if isinstance(event, Reading):
        flag = NOT_THIS_BOARD if beyond is not None and beyond(event.measurement) else ""
        return _measurement_words(record, event.measurement) + flag
    if isinstance(event, SessionOpened):
        extra = f", {event.ambient_c:g} °C" if event.ambient_c is not None else ""
        return (
            f"opened by {safe(event.technician)} (profile {safe(record.profile)}, "
            f"fieldtool {safe(event.tool_version)}{extra})"
        )
    if isinstance(event, DiagnosisSnapshot):
        return "diagnosis: " + ", ".join(_suspect(s) for s in event.suspects[:4])
    if isinstance(event, Action):
        mode = f" ({safe(event.mode)})" if event.mode else ""
        part = f", part {safe(event.part_used)}" if event.part_used else ""
        note = f" — {safe(event.note)}" if event.note else ""
        return f"action: {safe(event.designator)} {safe(event.done)}{mode}{part}{note}"
    return f"closed: {safe(event.outcome)}"


def _suspect(s: SnapshotSuspect) -> str:
    name = " ".join(safe(w) for w in (s.designator, s.mode) if w)
    return f"{name} {s.probability:.0%}"


def timeline(
    history: BoardHistory,
    sessions: tuple[Session, ...],
    conflicts: list[str],
    beyond: Callable[[Measurement], bool] | None = None,
) -> str:
    """The board's history grouped by session, oldest first (``beyond``: see ``describe``)."""
    real = [s for s in sessions if s.id is not None]
    profiles = sorted({r.profile for r in history.events if r.profile})
    lines = [
        f"Board {safe(history.board)}: {count(len(real), 'session')}, "
        f"{count(len(history.events), 'record')}"
        f" (profile {', '.join(safe(p) for p in profiles) or '?'})"
    ]
    for s in sessions:
        lines.append("")
        if s.id is None:
            lines.append("Records outside any session:")
        else:
            who = safe(s.opened.fields.get("technician", "?")) if s.opened else "?"
            state = s.outcome or "open (not closed yet)"
            lines.append(f"Session {when(s.start)} UTC · {who} · {state} · id {safe(s.id)[:12]}")
        for record in s.records:
            lines.append(f"  {when(record.time)[11:]}  {describe(record, beyond)}")
        found = confirmed_in(s)
        if found:
            words = [
                f"{safe(f.designator)} {safe(f.mode)}" + (" (verified)" if f.verified else "")
                for f in found
            ]
            lines.append(f"  confirmed failure: {', '.join(words)}")
    if conflicts:
        lines += ["", "Record ids stored twice with different content (both kept, from a merge):"]
        lines += [f"  {safe(c)}" for c in conflicts]
    if history.damaged:
        lines += ["", "Damaged lines (left on disk untouched, not used):"]
        lines += [f"  {safe(d.path)}:{d.line}: {safe(d.reason)}" for d in history.damaged]
    return "\n".join(lines)


def _more(total: int) -> list[str]:
    return [f"  ... and {total - LIST_LIMIT} more (--json lists all)"] if total > LIST_LIMIT else []


def fleet_text(view: FleetView) -> str:
    """The fleet summary for one profile."""
    outcomes = ", ".join(f"{n} {k}" for k, n in view.outcomes.items()) or "none"
    lines = [
        f"Fleet {safe(view.profile)}: {count(view.boards, 'board')}, "
        f"{count(view.sessions, 'session')} ({outcomes}), {count(view.repairs, 'repair')}",
        "",
        "Confirmed failures (an action naming a catalogued mode, in a session closed fixed):",
    ]
    if view.failures:
        lines.append(f"  {'part':<10}{'mode':<12}{'repairs':>8}{'boards':>8}{'verified':>10}")
        for f in view.failures[:LIST_LIMIT]:
            lines.append(
                f"  {safe(f.designator):<10}{safe(f.mode):<12}{f.count:>8}{f.boards:>8}"
                f"{f.verified:>10}"
            )
        lines += _more(len(view.failures))
    else:
        lines.append("  none yet")
    iv = view.intervals
    lines += ["", "Time between repairs of one board:"]
    if iv.count:
        lines.append(
            f"  {iv.count} intervals: median {iv.median_days:.1f} days, mean {iv.mean_days:.1f}"
            f" days, shortest {iv.shortest_days:.1f} days"
        )
    else:
        lines.append("  no board repaired twice yet")
    lines += ["", "Repeat repairs (the same part repaired again on one board):"]
    for r in view.repeat_repairs[:LIST_LIMIT]:
        dates = ", ".join(when(t)[:10] for t in r.times)
        lines.append(
            f"  {safe(r.board)}: {safe(r.designator)} ×{len(r.times)} ({', '.join(r.modes)};"
            f" {dates}); shortest gap {r.shortest_days:.1f} days"
        )
    lines += _more(len(view.repeat_repairs)) or ([] if view.repeat_repairs else ["  none"])
    lines += ["", "Boards with recurring faults (two or more repairs):"]
    for b in view.recurring_boards[:LIST_LIMIT]:
        parts = ", ".join(
            f"{safe(d)} {safe(m)}" + (f" ×{n}" if n > 1 else "") for d, m, n in b.failures
        )
        lines.append(f"  {safe(b.board)}: {b.repairs} repairs ({parts})")
    lines += _more(len(view.recurring_boards)) or ([] if view.recurring_boards else ["  none"])
    if view.damaged_lines:
        lines += [
            "",
            f"{count(view.damaged_lines, 'damaged line')} skipped; "
            "'fieldtool history SERIAL' shows where",
        ]
    return "\n".join(lines)


def merge_json(report: MergeReport) -> dict[str, Any]:
    """What a merge (or a push, or a pull) did, as the JSON of ``logs merge --json``."""
    return {
        "added": report.added,
        "already_present": report.already_present,
        "boards": report.boards,
        "conflicts": [vars(c) for c in report.conflicts],
        "damaged": [vars(d) for d in report.damaged],
        "skipped": list(report.skipped),
    }


def merge_text(report: MergeReport, head: str, not_done: str) -> str:
    """What a merge (or a push, or a pull) did, in the words of ``logs merge``."""
    lines = [
        f"{head}: {count(report.added, 'new record')} on {count(report.boards, 'board')}, "
        f"{report.already_present} already present"
    ]
    if report.conflicts:
        lines.append(
            f"{count(len(report.conflicts), 'conflict')}: same id, different content; "
            "both versions kept:"
        )
        lines += [f"  {safe(c.profile)}/{safe(c.board)}: {safe(c.id)}" for c in report.conflicts]
    if report.damaged:
        lines.append(
            f"{count(len(report.damaged), 'damaged line')} in the source, {not_done} "
            "(left there untouched):"
        )
        lines += [f"  {safe(d.path)}:{d.line}: {safe(d.reason)}" for d in report.damaged]
    if report.skipped:
        lines.append("skipped:")
        lines += [f"  {safe(s)}" for s in report.skipped]
    return "\n".join(lines)
