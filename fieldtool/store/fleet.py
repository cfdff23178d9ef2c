"""The fleet view from the store: the same view as from files, counted by the server.

The server keeps one ``board_view`` row per board (``summaries``): its sessions by outcome,
its confirmed failures, its repairs with the days between them and its parts repaired more
than once, counted as ``history.fleet`` counts them. A view sums those rows over the
profile's boards in a few queries, and ``history.fleet.finish_view`` orders the result
exactly as the files' view does.

A fieldtool whose fault catalogue or record schema differs from the one the store counted
with makes the profile's rows afresh at read time, into a temporary table, with its own copy
of the same SQL (``summaries.at_read_time``), and sums them the same way.

Boards holding records written before records named their session are grouped by position,
which needs the lines in order: those few boards are summarised from their lines with the
files' own code (``history.fleet.view_parts``) and added in.
"""

from __future__ import annotations

import itertools

from fieldtool.core.history import NotFoundError, check_name
from fieldtool.core.history.fleet import (
    FleetView,
    RecurringBoard,
    RepeatRepair,
    ViewParts,
    finish_view,
    view_parts,
)
from fieldtool.core.history.fleet_cache import SKIPPED_KINDS, summarize_bytes
from fieldtool.store.columns import from_column, to_column
from fieldtool.store.config import StoreAddress
from fieldtool.store.connect import connected, driver
from fieldtool.store.schema import summaries_match
from fieldtool.store.summaries import at_read_time, catalogue

_OF_PROFILE = "profile = %(profile)s AND board <> ALL(%(legacy)s)"
_OUTCOMES = f"""
SELECT label, sum(n)::bigint FROM {{t}}.board_view, unnest(outcomes, outcome_counts) o(label, n)
WHERE {_OF_PROFILE} GROUP BY label
"""
_FAILURES = f"""
SELECT d, m, sum(n)::bigint, count(*), sum(v)::bigint
FROM {{t}}.board_view, unnest(designators, modes, counts, verified) f(d, m, n, v)
WHERE {_OF_PROFILE} GROUP BY d, m
"""
_REPAIRS = f"""
SELECT coalesce(sum(repairs), 0)::bigint,
    (SELECT array_agg(gap) FROM {{t}}.board_view, unnest(gaps) gap WHERE {_OF_PROFILE})
FROM {{t}}.board_view WHERE {_OF_PROFILE}
"""
_RECURRING = f"""
SELECT board, repairs, first, last, designators, modes, counts
FROM {{t}}.board_view WHERE repairs > 1 AND {_OF_PROFILE}
"""
_REPEATS = f"""
SELECT board, repeated, shortest, repeats, repeat_modes, repeat_times
FROM {{t}}.board_view WHERE repeated IS NOT NULL AND {_OF_PROFILE}
"""
_LEGACY_LINES = f"""
SELECT line FROM fieldtool.records
WHERE board = %s AND profile = %s AND kind NOT IN ({", ".join(f"'{k}'" for k in SKIPPED_KINDS)})
ORDER BY tk, seq
"""


def _snapshot(conn):
    """One transaction that sees one moment of the store, whatever pushes run meanwhile."""
    conn.isolation_level = driver().IsolationLevel.REPEATABLE_READ
    return conn.transaction()


def _prepare(conn, address: StoreAddress, profile_name: str) -> tuple[str, dict, list[str]]:
    """Where the per-board counts are (``fieldtool`` or ``pg_temp``), the query parameters
    and the boards holding records without a session id; an error for an unknown profile."""
    profile = to_column(profile_name)
    rows = conn.execute(
        "SELECT board, legacy > 0 FROM fieldtool.boards WHERE profile = %s", (profile,)
    ).fetchall()
    if not rows:
        known = sorted(from_column(p) for (p,) in conn.execute(
            "SELECT DISTINCT profile FROM fieldtool.boards"
        ))  # fmt: skip
        hint = f"profiles with histories: {', '.join(known)}" if known else "it holds none"
        raise NotFoundError(
            f"no histories for profile {profile_name!r} in the store at {address.shown}; {hint}"
        )
    legacy = [board for board, old in rows if old]
    params = {"profile": profile, "legacy": legacy, "boards": len(rows), **catalogue()}
    if summaries_match(conn, address.shown):
        return "fieldtool", params, legacy
    for statement in at_read_time():
        conn.execute(statement, params)
    conn.execute("ANALYZE pg_temp.board_view")
    return "pg_temp", params, legacy


def _legacy_parts(conn, profile: str, legacy: list[str]) -> ViewParts:
    """The boards with records older than session ids, summarised from their lines."""
    summaries = []
    for board in legacy:
        lines = conn.execute(_LEGACY_LINES, (board, profile)).fetchall()
        data = "\n".join(line for (line,) in lines).encode("utf-8")
        summaries.append(summarize_bytes(from_column(board), data))
    return view_parts(summaries)


def _failures(cur, t: str, params: dict) -> dict[tuple[str, str], list[int]]:
    return {
        (from_column(d), from_column(m)): [count, boards, verified]
        for d, m, count, boards, verified in cur.execute(_FAILURES.format(t=t), params).fetchall()
    }


def _plain(*columns: list[str]) -> bool:
    """True when no value is escaped (no backslash): then each value is itself, and the
    server's order of them (by bytes) is the files' order (by code point)."""
    return "\\" not in "".join(itertools.chain.from_iterable(columns))


def _recurring(board, repairs, first, last, designators, modes, counts) -> RecurringBoard:
    if _plain(designators, modes, [board, first, last]):
        tally = tuple(zip(designators, modes, counts, strict=True))
        return RecurringBoard(board, repairs, tally, first, last)
    tally = zip(map(from_column, designators), map(from_column, modes), counts, strict=True)
    first, last = from_column(first), from_column(last)
    return RecurringBoard(from_column(board), repairs, tuple(sorted(tally)), first, last)


def _repeats(board, repeated, shortest, lengths, modes, times) -> list[RepeatRepair]:
    if not _plain(repeated, modes, times, [board]):
        board, repeated = from_column(board), list(map(from_column, repeated))
        modes, times = list(map(from_column, modes)), list(map(from_column, times))
    found, at = [], 0
    for designator, days, n in zip(repeated, shortest, lengths, strict=True):
        end = at + n
        found.append(
            RepeatRepair(board, designator, tuple(modes[at:end]), tuple(times[at:end]), days)
        )
        at = end
    return found


def fleet_view(
    address: StoreAddress, profile_name: str, *, statement_timeout_s: float | None = None
) -> FleetView:
    """The fleet view of one profile from the store (same shape as from files)."""
    check_name(profile_name, "profile name", existing=True)
    with connected(address, statement_timeout_s=statement_timeout_s) as conn, _snapshot(conn):
        t, params, legacy = _prepare(conn, address, profile_name)
        parts = ViewParts(boards=params["boards"] - len(legacy))
        cur = conn.cursor(binary=True)  # arrays of thousands of values: binary reads quicker
        for label, count in cur.execute(_OUTCOMES.format(t=t), params).fetchall():
            parts.outcomes[from_column(label)] += count
        parts.failures = _failures(cur, t, params)
        parts.repairs, gaps = cur.execute(_REPAIRS.format(t=t), params).fetchone()
        parts.gaps = gaps or []
        rows = cur.execute(_RECURRING.format(t=t), params).fetchall()
        parts.recurring = [_recurring(*row) for row in rows]
        for row in cur.execute(_REPEATS.format(t=t), params).fetchall():
            parts.repeats += _repeats(*row)
        parts.add(_legacy_parts(conn, params["profile"], legacy))
    return finish_view(profile_name, parts)


def confirmed_failures(
    address: StoreAddress, profile_name: str, *, statement_timeout_s: float | None = None
) -> dict[tuple[str, str], int]:
    """Confirmed failures of one board type in the store: (designator, mode) → count.

    A profile the store holds nothing of has none (an empty mapping), as from files.
    """
    check_name(profile_name, "profile name", existing=True)
    try:
        with connected(address, statement_timeout_s=statement_timeout_s) as conn:
            with _snapshot(conn):
                t, params, legacy = _prepare(conn, address, profile_name)
                parts = ViewParts(failures=_failures(conn, t, params))
                parts.add(_legacy_parts(conn, params["profile"], legacy))
    except NotFoundError:
        return {}
    return {key: counts[0] for key, counts in parts.failures.items()}
