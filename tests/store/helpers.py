"""Fleets for the store's tests: ordinary sessions, and lines the history accepts but rarely
sees (hostile names, newer schemas, old records without session ids)."""

from __future__ import annotations

import json
import random
import uuid
from pathlib import Path

from fieldtool.cli import main
from fieldtool.core import history as h
from tests.history.helpers import day, session

# What a history line may hold that a careless query would mangle: quotes, semicolons,
# backslashes, SQL comment marks, unicode in several planes, and control characters (the
# history escapes them in JSON; check_name refuses them only in serials and profile names).
# Serials today's naming rule allows that still look like SQL or format strings, and serials
# an older version let through (kept readable, so a store must carry them too).
HOSTILE_SERIALS = ["O Brien (DROP TABLE records) --", "x#1 + (y) -- z", "Ωmega-µ-板", "s.(x)_s"]
OLDER_SERIALS = ["O'Brien;DROP TABLE records;--", 'quote"and`tick`$1', "Ωmega-µ-板-🔌", "%s%(x)s"]
HOSTILE_TEXT = [
    "'); DELETE FROM fieldtool.records; --",
    'tab\there "quoted" back\\slash',
    "bell\x07 nul\x00 escape\x1b[31m del\x7f",
    "line\u2028separator \ud800 lone surrogate",
    "Ω 板 🔌 \u200b zero-width",
]


def run(capsys, *argv: str) -> tuple[int, str, str]:
    """Run the CLI in this process; (exit code, stdout, stderr)."""
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def raw_line(logs: Path, profile: str, serial: str, **fields) -> dict:
    """Append one line written by hand (any content the JSON allows) to a board's file."""
    record = {
        "schema": h.schema_for(fields.get("kind", "")),
        "id": uuid.uuid4().hex,
        "time": h.now_utc(),
        "board": serial,
        "profile": profile,
        **fields,
    }
    path = logs / profile / f"{serial}.jsonl"  # as an older version named it, unchecked
    path.parent.mkdir(parents=True, exist_ok=True)
    line = json.dumps(record, ensure_ascii=False, separators=(",", ":"))
    try:
        line.encode("utf-8")
    except UnicodeEncodeError:  # a lone surrogate: written as its escape, as JSON allows
        line = json.dumps(record, separators=(",", ":"))
    with path.open("a", encoding="utf-8") as f:
        f.write(line + "\n")
    return record


def varied_fleet(logs: Path, profile: str, seed: int, boards: int = 12) -> None:
    """A fleet with every case the fleet view distinguishes, drawn from ``seed``."""
    rng = random.Random(seed)
    parts = ["D1", "D2", "D5", "C3", "C4", "drive", "supply", " D5 ", "CR105"]
    modes = ["open", "short", "leaky", "weak", "lowcap", "esr", "stuck-low", "low", "melted", None]
    outcomes = ["fixed", "fixed", "fixed", "not-fixed", "escalated", None]
    for b in range(boards):
        serial = f"SN{seed}-{b:02d}"
        t = rng.uniform(0, 30)
        for _ in range(rng.randint(1, 6)):
            actions = [(rng.choice(parts), rng.choice(modes)) for _ in range(rng.randint(0, 3))]
            session(
                logs,
                serial,
                day(t),
                rng.choice(outcomes),
                actions,
                profile=profile,
                verify=rng.random() < 0.5,
                legacy=b == 0,  # one board written before records named their session
            )
            t += rng.uniform(0.01, 60)
    odd_sessions(logs, profile, f"SN{seed}-odd", hostile=seed % 2 == 1)


def odd_sessions(logs: Path, profile: str, serial: str, hostile: bool = False) -> None:
    """Sessions at the edges of the rules, written line by line."""
    sid = uuid.uuid4().hex
    common = {"session": sid}
    raw_line(logs, profile, serial, kind="session-opened", session_id=sid, technician="x",
             profile_hash="p", tool_version="0",
             time="2026-01-05T09:00:00+00:00", **common)  # fmt: skip  # not our spelling
    raw_line(logs, profile, serial, kind="verification", node="S1", volts=1.0, schema=1,
             time="2026-01-05T09:01:00.000000Z", **common)  # fmt: skip  # before the action
    raw_line(logs, profile, serial, kind="action", designator="D2", mode="open", done="r",
             time="2026-01-05T09:02:00.000000Z", **common)  # fmt: skip
    raw_line(logs, profile, serial, kind="action", designator="D2", mode="open", done="r",
             schema=99, time="2026-01-05T09:03:00.000000Z", **common)  # fmt: skip  # newer
    raw_line(logs, profile, serial, kind="action", designator=7, mode="open", done="r",
             time="2026-01-05T09:03:30.000000Z", **common)  # fmt: skip  # not a string
    raw_line(logs, profile, serial, kind="unknown-kind", time="2026-01-05T09:04:00.000000Z",
             **common)  # fmt: skip
    raw_line(logs, profile, serial, kind="session-closed", outcome="not-fixed",
             time="2026-01-05T09:05:00.000000Z", **common)  # fmt: skip
    raw_line(logs, profile, serial, kind="session-closed", outcome="fixed",
             time="2026-01-05T09:06:00.000000Z", **common)  # fmt: skip  # closed twice: later
    # A session of readings only (no opening): the fleet view never counts it.
    raw_line(logs, profile, serial, kind="reading", node="S1", volts=2.0, session="r-only",
             schema=1, time="2026-01-06T09:00:00.000000Z")  # fmt: skip
    # A session with no opening record, closed fixed: it starts at its first record.
    raw_line(logs, profile, serial, kind="action", designator="C4", mode="short", done="r",
             session="no-open", time="2026-01-07T09:00:00.000000Z")  # fmt: skip
    raw_line(logs, profile, serial, kind="session-closed", outcome=["fixed"], session="odd-out",
             time="2026-01-08T09:00:00.000000Z")  # fmt: skip  # an outcome that is no string
    raw_line(logs, profile, serial, kind="session-closed", outcome="fixed", session="no-open",
             time="2026-01-07T10:00:00.000000Z")  # fmt: skip
    if hostile:
        hid = uuid.uuid4().hex
        for i, text in enumerate(HOSTILE_TEXT):
            raw_line(logs, profile, serial, kind="action", designator=text, mode="open",
                     done=text, note=text, session=hid,
                     time=f"2026-02-0{i + 1}T09:00:00.000000Z")  # fmt: skip
        raw_line(logs, profile, serial, kind="session-closed", outcome="fixed", session=hid,
                 time="2026-02-09T09:00:00.000000Z")  # fmt: skip
