"""Build whole sessions in a real logs folder for history tests."""

from __future__ import annotations

import json
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from pathlib import Path

from fieldtool.core import history as h
from tests.readings import reading, verification

T0 = datetime(2026, 1, 5, 9, 0, tzinfo=UTC)


def day(n: float) -> datetime:
    """``n`` days after a fixed start."""
    return T0 + timedelta(days=n)


def session(
    logs: Path,
    serial: str,
    when: datetime,
    outcome: str | None,
    actions: Sequence[tuple[str, str | None]] = (),
    *,
    profile: str = "cw6",
    verify: bool = False,
    legacy: bool = False,
) -> str:
    """Write one session; ``legacy`` writes records without a session id (old format)."""
    opened = h.SessionOpened(technician="ana", profile_hash="abc", tool_version="0.1.0")
    events: list[h.Event] = [opened, reading("S1", 3.0)]
    events.append(h.DiagnosisSnapshot(suspects=(h.SnapshotSuspect("D5", "open", 0.7),)))
    events += [h.Action(designator=d, done="replaced", mode=m) for d, m in actions]
    if verify:
        events.append(verification("S1", 12.0))
    if outcome:
        events.append(h.SessionClosed(outcome=outcome))
    for i, event in enumerate(events):
        sid = None if legacy else opened.session_id
        when_i = when + timedelta(minutes=i)
        if legacy:
            _append_legacy(logs, profile, serial, event, when_i)
        else:
            h.append(logs, profile, serial, event, time=when_i, session=sid)
    return opened.session_id


def _append_legacy(logs: Path, profile: str, serial: str, event: h.Event, when: datetime) -> None:
    """A record as the store wrote it before records carried a session id."""
    rec = h.append(logs, profile, serial, event, time=when)
    path = h.board_path(logs, profile, serial)
    lines = path.read_text().splitlines()
    obj = json.loads(lines[-1])
    obj.pop("session", None)
    assert obj["id"] == rec.id
    lines[-1] = json.dumps(obj, separators=(",", ":"), ensure_ascii=False)
    path.write_text("\n".join(lines) + "\n")
