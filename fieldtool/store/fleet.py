"""The fleet view from the store: the same view as from files, counted by the server.

The store's insert trigger keeps, per board, the confirmed failures (``board_failures``),
the parts repaired more than once (``board_repeats``) and the repairs with the days between
them (``board_view``), counted as ``history.fleet`` counts them (``schema``). A view then
sums those over the profile's boards in a few queries, and ``history.fleet.finish_view``
orders them exactly as the files' view does. Days are computed as the files compute them
(whole microseconds, then float division), so both views agree to the last bit.

When this fieldtool's fault catalogue or record schema differs from the one the store counted
with (another version), the per-board counts are made afresh at read time from ``repairs``
into temporary tables, with the same SQL, and summed the same way.

Boards holding records written before records named their session are grouped by position,
which needs the lines in order: those few boards are summarised from their lines with the
files' own code (``history.fleet.view_parts``) and added in.
"""

from __future__ import annotations

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
from fieldtool.store.schema import board_counts, catalogue, confirmed_filter, summaries_match

_TEMPORARY = """
CREATE TEMP TABLE IF NOT EXISTS board_failures (LIKE fieldtool.board_failures)
    ON COMMIT DELETE ROWS;
CREATE TEMP TABLE IF NOT EXISTS board_repeats (LIKE fieldtool.board_repeats)
    ON COMMIT DELETE ROWS;
CREATE TEMP TABLE IF NOT EXISTS board_view (LIKE fieldtool.board_view) ON COMMIT DELETE ROWS;
"""
_AT_READ_TIME = board_counts(
    "pg_temp",
    "SELECT profile, board FROM fieldtool.boards WHERE profile = %(profile)s",
    confirmed_filter("%(schema)s", "%(targets)s", "%(target_modes)s", "%(part_modes)s"),
)
_OF_PROFILE = "profile = %(profile)s AND board <> ALL(%(legacy)s)"
_OUTCOMES = f"""
SELECT CASE WHEN closed_tk IS NULL OR coalesce(outcome, '') = '' THEN 'open' ELSE outcome END,
    count(*)
FROM fieldtool.sessions WHERE {_OF_PROFILE} GROUP BY 1
"""
_FAILURES = f"""
SELECT designator, mode, sum(n), count(*), sum(verified)
FROM {{t}}.board_failures WHERE {_OF_PROFILE} GROUP BY designator, mode
"""
_REPAIRS = f"""
SELECT coalesce(sum(repairs), 0),
    (SELECT array_agg(gap) FROM {{t}}.board_view, unnest(gaps) gap WHERE {_OF_PROFILE})
FROM {{t}}.board_view WHERE {_OF_PROFILE}
"""
_RECURRING = """
SELECT v.board, v.repairs, v.first, v.last,
    array_agg(f.designator), array_agg(f.mode), array_agg(f.n)
FROM {t}.board_view v
JOIN {t}.board_failures f ON f.profile = v.profile AND f.board = v.board
WHERE v.repairs > 1 AND v.profile = %(profile)s AND v.board <> ALL(%(legacy)s)
GROUP BY v.board, v.repairs, v.first, v.last
"""
_REPEATS = f"""
SELECT board, designator, modes, times, shortest FROM {{t}}.board_repeats WHERE {_OF_PROFILE}
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
    conn.execute(_TEMPORARY)
    for statement in _AT_READ_TIME:
        conn.execute(statement, params)
    conn.execute("ANALYZE pg_temp.board_failures, pg_temp.board_repeats, pg_temp.board_view")
    return "pg_temp", params, legacy


def _legacy_parts(conn, profile: str, legacy: list[str]) -> ViewParts:
    """The boards with records older than session ids, summarised from their lines."""
    summaries = []
    for board in legacy:
        lines = conn.execute(_LEGACY_LINES, (board, profile)).fetchall()
        data = "\n".join(line for (line,) in lines).encode("utf-8")
        summaries.append(summarize_bytes(from_column(board), data))
    return view_parts(summaries)


def _failures(conn, t: str, params: dict) -> dict[tuple[str, str], list[int]]:
    return {
        (from_column(d), from_column(m)): [count, boards, verified]
        for d, m, count, boards, verified in conn.execute(_FAILURES.format(t=t), params)
    }


def fleet_view(
    address: StoreAddress, profile_name: str, *, statement_timeout_s: float | None = None
) -> FleetView:
    """The fleet view of one profile from the store (same shape as from files)."""
    check_name(profile_name, "profile name")
    with connected(address, statement_timeout_s=statement_timeout_s) as conn, _snapshot(conn):
        t, params, legacy = _prepare(conn, address, profile_name)
        parts = ViewParts(boards=params["boards"] - len(legacy))
        for label, count in conn.execute(_OUTCOMES, params):
            parts.outcomes[from_column(label)] += count
        parts.failures = _failures(conn, t, params)
        parts.repairs, gaps = conn.execute(_REPAIRS.format(t=t), params).fetchone()
        parts.gaps = gaps or []
        for board, repairs, first, last, ds, ms, ns in conn.execute(_RECURRING.format(t=t), params):
            tally = sorted(zip(map(from_column, ds), map(from_column, ms), ns, strict=True))
            parts.recurring.append(
                RecurringBoard(from_column(board), repairs, tuple(tally), first, last)
            )
        for board, d, modes, times, shortest in conn.execute(_REPEATS.format(t=t), params):
            modes = tuple(map(from_column, modes))
            parts.repeats.append(
                RepeatRepair(from_column(board), from_column(d), modes, tuple(times), shortest)
            )
        parts.add(_legacy_parts(conn, params["profile"], legacy))
    return finish_view(profile_name, parts)


def confirmed_failures(
    address: StoreAddress, profile_name: str, *, statement_timeout_s: float | None = None
) -> dict[tuple[str, str], int]:
    """Confirmed failures of one board type in the store: (designator, mode) → count.

    A profile the store holds nothing of has none (an empty mapping), as from files.
    """
    check_name(profile_name, "profile name")
    try:
        with connected(address, statement_timeout_s=statement_timeout_s) as conn:
            with _snapshot(conn):
                t, params, legacy = _prepare(conn, address, profile_name)
                parts = ViewParts(failures=_failures(conn, t, params))
                parts.add(_legacy_parts(conn, params["profile"], legacy))
    except NotFoundError:
        return {}
    return {key: counts[0] for key, counts in parts.failures.items()}
