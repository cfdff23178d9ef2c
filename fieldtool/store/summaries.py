"""What the server keeps up to date on every insert, so the fleet view is a few queries.

On every insert into ``records``, a statement trigger (``SECURITY DEFINER``, so technicians
need no right to change these tables):

1. counts the records per board in ``boards``, locking the boards' rows first, in one order:
   pushes touching the same board take turns here, so every statement after this one sees
   what the other push committed;
2. folds the new records into ``sessions`` (each session's first record and opening, its
   latest closing by time and arrival, its latest verification: commutative, so pushes
   running at once give the same result in any order) and ``actions``;
3. rebuilds ``board_view`` for each board it touched: one row per board with what the fleet
   view sums (outcomes, confirmed failures per part and mode, repairs and the days between
   them, parts repaired more than once), made by ``fieldtool.board_summary`` with this
   version's fault catalogue and record schema written in.

``board_summary`` takes the catalogue as arguments, so a fieldtool whose catalogue differs
from the store's runs its own copy (a temporary function) over ``sessions`` and ``actions``
at read time instead. The fingerprints in ``meta`` say which logic made what: ``derived``
for ``sessions``/``actions`` (another one: ``store init`` must rebuild), ``summary`` for
``board_view``. Days are computed as the files compute them (whole microseconds, then float
division: ``days``), so both views agree to the last bit.
"""

from __future__ import annotations

import hashlib

from fieldtool.core.history import (
    Action,
    SessionClosed,
    SessionOpened,
    Verification,
    schema_for,
)
from fieldtool.core.history.fleet_cache import SKIPPED_KINDS
from fieldtool.core.history.sessions import PART_MODES, TARGET_MODES

_PLAIN = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_:-")


def literal(word: str) -> str:
    """A catalogue or kind name as an SQL literal; only plain names are ever written in."""
    if not word or not set(word) <= _PLAIN:
        raise ValueError(f"not a plain name for the store's SQL: {word!r}")
    return f"'{word}'"


def _array(words) -> str:
    return f"ARRAY[{', '.join(map(literal, words))}]::text[]"


def days(micros: str) -> str:
    """SQL for microseconds as days, rounded as Python's ``timedelta.total_seconds() / 86400``."""
    return f"((({micros})::numeric / 1000000)::float8 / 86400)"


def catalogue() -> dict[str, object]:
    """This fieldtool's fault catalogue and the action schema it reads, as ``board_summary``'s
    arguments."""
    return {
        "schema": schema_for(Action.kind),
        "targets": sorted(TARGET_MODES),
        "target_modes": sorted(f"{t}:{m}" for t, modes in TARGET_MODES.items() for m in modes),
        "part_modes": sorted(PART_MODES),
    }


_ARGS = "%(schema)s, %(targets)s, %(target_modes)s, %(part_modes)s"


def _baked_args() -> str:
    c = catalogue()
    return ", ".join(
        [str(int(c["schema"])), _array(c["targets"]), _array(c["target_modes"])]
        + [_array(c["part_modes"])]
    )


def board_summary_sql(schema: str) -> str:
    """``CREATE FUNCTION <schema>.board_summary``: one board's ``board_view`` row.

    What counts (``history.sessions``): an action naming a part or board target and a mode
    of the catalogue, of a record schema this version reads, in a session whose latest
    closing says ``fixed``; one per session, part and mode, verified when the session holds
    a verification at or after any such action.
    """
    open_label = "CASE WHEN closed_tk IS NULL OR coalesce(outcome, '') = '' THEN 'open' "
    return f"""
CREATE OR REPLACE FUNCTION {schema}.board_summary(
    p text, b text, max_schema integer, targets text[], target_modes text[], part_modes text[]
) RETURNS fieldtool.board_view LANGUAGE sql STABLE AS $$
WITH fixed AS (
    SELECT session, first_tk, verified_tk, coalesce(opened_tk, first_tk) AS start,
        CASE WHEN opened_tk IS NULL THEN first_us ELSE opened_us END AS start_us
    FROM fieldtool.sessions
    WHERE profile = p AND board = b AND closed_tk IS NOT NULL AND outcome = 'fixed'
), confirmed AS (
    SELECT f.session, f.start, f.start_us, f.first_tk, a.designator, a.mode,
        bool_or(coalesce(f.verified_tk >= a.tk, false)) AS verified,
        min(a.tk) AS tk1, min(a.seq) AS seq1
    FROM fixed f
    JOIN fieldtool.actions a ON a.profile = p AND a.board = b AND a.session = f.session
    WHERE a.schema_version <= max_schema AND a.designator <> ''
        AND CASE WHEN a.designator = ANY(targets)
            THEN a.designator || ':' || a.mode = ANY(target_modes)
            ELSE a.mode = ANY(part_modes) END
    GROUP BY f.session, f.start, f.start_us, f.first_tk, a.designator, a.mode
), tally AS (
    SELECT designator, mode, count(*)::integer AS n,
        (count(*) FILTER (WHERE verified))::integer AS v
    FROM confirmed GROUP BY designator, mode
), part AS (
    SELECT designator, mode, start, row_number() OVER w AS o,
        {days("start_us - lag(start_us) OVER w")} AS gap
    FROM confirmed
    WINDOW w AS (PARTITION BY designator ORDER BY start, first_tk, session, tk1, seq1)
), repeated AS (
    SELECT designator, array_agg(mode ORDER BY o) AS modes, array_agg(start ORDER BY o) AS times,
        min(gap) AS shortest
    FROM part GROUP BY designator HAVING count(*) > 1
), repair AS (
    SELECT DISTINCT session, start, start_us, first_tk FROM confirmed
), spacing AS (
    SELECT row_number() OVER w AS o,
        {days("start_us")} - lag({days("start_us")}) OVER w AS gap
    FROM repair WINDOW w AS (ORDER BY start, first_tk, session)
), outcome AS (
    SELECT {open_label}ELSE outcome END AS label, count(*)::integer AS n
    FROM fieldtool.sessions WHERE profile = p AND board = b GROUP BY 1
)
SELECT p, b,
    (SELECT count(*)::integer FROM repair),
    (SELECT min(start) FROM repair),
    (SELECT max(start) FROM repair),
    (SELECT array_agg(gap ORDER BY o) FROM spacing WHERE gap IS NOT NULL),
    (SELECT array_agg(label ORDER BY label) FROM outcome),
    (SELECT array_agg(n ORDER BY label) FROM outcome),
    (SELECT array_agg(designator ORDER BY designator, mode) FROM tally),
    (SELECT array_agg(mode ORDER BY designator, mode) FROM tally),
    (SELECT array_agg(n ORDER BY designator, mode) FROM tally),
    (SELECT array_agg(v ORDER BY designator, mode) FROM tally),
    (SELECT array_agg(designator ORDER BY designator) FROM repeated),
    (SELECT array_agg(shortest ORDER BY designator) FROM repeated),
    (SELECT array_agg(cardinality(modes) ORDER BY designator) FROM repeated),
    (SELECT array_agg(m ORDER BY r.designator, k)
        FROM repeated r, unnest(r.modes) WITH ORDINALITY AS u(m, k)),
    (SELECT array_agg(t ORDER BY r.designator, k)
        FROM repeated r, unnest(r.times) WITH ORDINALITY AS u(t, k))
$$;
"""


def board_view_sql(schema: str, boards: str, args: str) -> str:
    """SQL replacing ``<schema>.board_view``'s rows for the boards ``boards`` selects."""
    return f"""
INSERT INTO {schema}.board_view
SELECT s.* FROM ({boards}) t
CROSS JOIN LATERAL {schema}.board_summary(t.profile, t.board, {args}) s
ON CONFLICT (profile, board) DO UPDATE SET (repairs, first, last, gaps, outcomes, outcome_counts,
    designators, modes, counts, verified, repeated, shortest, repeats, repeat_modes,
    repeat_times) = (excluded.repairs, excluded.first, excluded.last, excluded.gaps,
    excluded.outcomes, excluded.outcome_counts, excluded.designators, excluded.modes,
    excluded.counts, excluded.verified, excluded.repeated, excluded.shortest, excluded.repeats,
    excluded.repeat_modes, excluded.repeat_times)"""


def derived_sql(added: str) -> list[str]:
    """The statements folding the records ``added`` into ``boards``, ``sessions``, ``actions``."""
    closing = "kind = " + literal(SessionClosed.kind)
    opening = "kind = " + literal(SessionOpened.kind)
    later = """excluded.closed_tk IS NOT NULL AND (s.closed_tk IS NULL
            OR (excluded.closed_tk, excluded.closed_seq) > (s.closed_tk, s.closed_seq))"""
    fleet_kinds = f"session IS NOT NULL AND kind NOT IN ({', '.join(map(literal, SKIPPED_KINDS))})"
    return [
        f"""
INSERT INTO fieldtool.boards AS b (profile, board, records, legacy)
SELECT profile, board, count(*), count(*) FILTER (WHERE session IS NULL)
FROM {added} GROUP BY profile, board ORDER BY profile, board
ON CONFLICT (profile, board) DO UPDATE
SET records = b.records + excluded.records, legacy = b.legacy + excluded.legacy""",
        f"""
WITH fleet AS MATERIALIZED (
    SELECT profile, board, session, kind, tk, us, seq, designator, mode, outcome,
        schema_version
    FROM {added} WHERE {fleet_kinds}
), new_actions AS (
    INSERT INTO fieldtool.actions
        (profile, board, session, seq, tk, designator, mode, schema_version)
    SELECT profile, board, session, seq, tk, designator, mode, schema_version FROM fleet
    WHERE kind = {literal(Action.kind)} AND designator IS NOT NULL AND mode IS NOT NULL
), summary AS (
    SELECT profile, board, session, min(tk) AS first_tk, min(us) AS first_us,
        min(tk) FILTER (WHERE {opening}) AS opened_tk,
        min(us) FILTER (WHERE {opening}) AS opened_us,
        max(tk) FILTER (WHERE kind = {literal(Verification.kind)}) AS verified_tk,
        -- the latest closing by (time, arrival): arrays compare element by element
        max(ARRAY[tk, lpad(seq::text, 19, '0') COLLATE "C", outcome])
            FILTER (WHERE {closing}) AS closed
    FROM fleet GROUP BY profile, board, session
)
INSERT INTO fieldtool.sessions AS s (profile, board, session, first_tk, first_us, opened_tk,
    opened_us, verified_tk, closed_tk, closed_seq, outcome)
SELECT profile, board, session, first_tk, first_us, opened_tk, opened_us, verified_tk,
    closed[1], closed[2]::bigint, closed[3]
FROM summary ORDER BY profile, board, session
ON CONFLICT (profile, board, session) DO UPDATE SET
    first_tk = LEAST(s.first_tk, excluded.first_tk),
    first_us = LEAST(s.first_us, excluded.first_us),
    opened_tk = LEAST(s.opened_tk, excluded.opened_tk),
    opened_us = LEAST(s.opened_us, excluded.opened_us),
    closed_tk = CASE WHEN {later} THEN excluded.closed_tk ELSE s.closed_tk END,
    closed_seq = CASE WHEN {later} THEN excluded.closed_seq ELSE s.closed_seq END,
    outcome = CASE WHEN {later} THEN excluded.outcome ELSE s.outcome END,
    verified_tk = GREATEST(s.verified_tk, excluded.verified_tk)""",
    ]


def _fingerprint(*texts: str) -> str:
    return hashlib.sha256("\n".join(texts).encode("utf-8")).hexdigest()[:16]


DERIVED = _fingerprint(*derived_sql("added"))
SUMMARY = _fingerprint(board_summary_sql("fieldtool"), _baked_args())


def trigger_sql() -> str:
    """The insert trigger with this version's statements and catalogue written in."""
    touched = "SELECT DISTINCT profile, board FROM added ORDER BY profile, board"
    body = ";\n".join([*derived_sql("added"), board_view_sql("fieldtool", touched, _baked_args())])
    return f"""
{board_summary_sql("fieldtool")}
CREATE OR REPLACE FUNCTION fieldtool.records_added() RETURNS trigger
LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, pg_temp
-- A batch touches a few boards of many: reach their rows by index, never by scanning whole
-- tables (statistics lag behind a table that a first push is filling).
SET enable_seqscan = off AS $$
BEGIN
{body};
    RETURN NULL;
END $$;
DROP TRIGGER IF EXISTS records_added ON fieldtool.records;
CREATE TRIGGER records_added AFTER INSERT ON fieldtool.records
REFERENCING NEW TABLE AS added FOR EACH STATEMENT EXECUTE FUNCTION fieldtool.records_added();
"""


def rebuild(conn) -> None:
    """Install this version's trigger and rebuild every summary from the records."""
    conn.execute(trigger_sql())
    conn.execute(
        "TRUNCATE fieldtool.boards, fieldtool.sessions, fieldtool.actions, fieldtool.board_view"
    )
    for statement in derived_sql("fieldtool.records"):
        conn.execute(statement)
    everything = "SELECT profile, board FROM fieldtool.boards"
    conn.execute(board_view_sql("fieldtool", everything, _baked_args()))


def at_read_time() -> list[str]:
    """SQL making ``pg_temp.board_view`` for one profile with this version's catalogue
    (parameters ``profile`` and ``catalogue()``'s), for a store whose summaries differ."""
    boards = "SELECT profile, board FROM fieldtool.boards WHERE profile = %(profile)s"
    return [
        "CREATE TEMP TABLE IF NOT EXISTS board_view (LIKE fieldtool.board_view INCLUDING ALL)"
        " ON COMMIT DELETE ROWS",
        board_summary_sql("pg_temp"),
        board_view_sql("pg_temp", boards, _ARGS),
    ]
