"""The store's tables, its forward migrations, and the technician role an administrator creates.

Everything lives in the schema ``fieldtool`` of the database the address names:

- ``records``: one row per history line, the line whole (``line``) beside the columns of
  ``columns.COLUMNS``; ``(id, version)`` is unique: version 0 is the first content seen for an
  id, 1, 2, ... are conflicting contents (kept, as ``logs merge`` keeps them). Append-only for
  everyone: a statement trigger refuses UPDATE, DELETE and TRUNCATE (an administrator who
  must remove data disables it deliberately), and the technician role has no such privilege.
- What the fleet view needs, kept up to date by a trigger on every insert into ``records``
  (a ``SECURITY DEFINER`` function, so technicians need no right to change them):
  ``boards`` (records per board), ``sessions`` (each session's start, latest closing and
  latest verification), ``actions``, ``repairs`` (the actions of sessions closed fixed, with
  whether a verification followed) and, per board, ``board_failures``, ``board_repeats`` and
  ``board_view`` (the confirmed failures as ``history.fleet`` counts them). The trigger locks
  the boards' rows first, in one order, so pushes touching the same board take turns and
  each summary is rebuilt from everything committed.
- ``meta``: the schema version, the store's id, and the fingerprints of the summaries'
  logic (``derived``: sessions and repairs; ``catalogue``: the fault catalogue and record
  schema the per-board counts were made with). ``store init`` rebuilds the summaries when a
  fingerprint differs from this fieldtool's; a fieldtool with another catalogue counts from
  ``repairs`` at read time instead.

``MIGRATIONS[v]`` takes a store from version v to v + 1; ``store init`` applies the missing
ones in one transaction under an advisory lock.
"""

from __future__ import annotations

import hashlib
import uuid

from fieldtool.core.history import SCHEMA, Action, SessionClosed, SessionOpened, Verification
from fieldtool.core.history.fleet_cache import SKIPPED_KINDS
from fieldtool.core.history.sessions import PART_MODES, TARGET_MODES
from fieldtool.store.errors import StoreSchemaError

TECHNICIAN_ROLE = "fieldtool_technician"
MIN_SERVER = 140000  # PostgreSQL 14: EXTRACT gives exact numbers, the days depend on it


_PLAIN = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_:-")


def _literal(word: str) -> str:
    """A catalogue or kind name as an SQL literal; only plain names are ever baked in."""
    if not word or not set(word) <= _PLAIN:
        raise ValueError(f"not a plain name for the store's SQL: {word!r}")
    return f"'{word}'"


def _array(words) -> str:
    return f"ARRAY[{', '.join(map(_literal, words))}]::text[]"


_SKIPPED = ", ".join(map(_literal, SKIPPED_KINDS))

_V1 = """
CREATE SCHEMA fieldtool;
REVOKE ALL ON SCHEMA fieldtool FROM PUBLIC;

CREATE TABLE fieldtool.meta (key text PRIMARY KEY, value text NOT NULL);

CREATE TABLE fieldtool.records (
    seq bigint GENERATED ALWAYS AS IDENTITY,
    id text COLLATE "C" NOT NULL,
    version integer NOT NULL DEFAULT 0 CHECK (version >= 0),
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    kind text COLLATE "C" NOT NULL,
    session text COLLATE "C",
    tk text COLLATE "C" NOT NULL,
    us bigint,
    schema_version integer NOT NULL,
    designator text COLLATE "C",
    mode text COLLATE "C",
    outcome text COLLATE "C",
    line text NOT NULL,
    pushed_at timestamptz NOT NULL DEFAULT now(),
    UNIQUE (id, version)
);
CREATE INDEX records_board ON fieldtool.records (board);

CREATE TABLE fieldtool.boards (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    records bigint NOT NULL,
    legacy bigint NOT NULL,  -- records without a session id: summarised from their lines
    PRIMARY KEY (profile, board)
);
CREATE TABLE fieldtool.sessions (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    session text COLLATE "C" NOT NULL,
    first_tk text COLLATE "C" NOT NULL,
    first_us bigint,
    opened_tk text COLLATE "C",
    opened_us bigint,
    closed_tk text COLLATE "C",
    closed_seq bigint,
    outcome text COLLATE "C",
    verified_tk text COLLATE "C",
    PRIMARY KEY (profile, board, session)
);
CREATE TABLE fieldtool.actions (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    session text COLLATE "C" NOT NULL,
    seq bigint NOT NULL,
    tk text COLLATE "C" NOT NULL,
    designator text COLLATE "C" NOT NULL,
    mode text COLLATE "C" NOT NULL,
    schema_version integer NOT NULL
);
CREATE INDEX actions_session ON fieldtool.actions (profile, board, session);
CREATE TABLE fieldtool.repairs (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    session text COLLATE "C" NOT NULL,
    start text COLLATE "C" NOT NULL,
    start_us bigint,
    first_tk text COLLATE "C" NOT NULL,
    seq bigint NOT NULL,
    tk text COLLATE "C" NOT NULL,
    designator text COLLATE "C" NOT NULL,
    mode text COLLATE "C" NOT NULL,
    schema_version integer NOT NULL,
    verified boolean NOT NULL
);
CREATE INDEX repairs_board ON fieldtool.repairs (profile, board, session);
CREATE TABLE fieldtool.board_failures (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    designator text COLLATE "C" NOT NULL,
    mode text COLLATE "C" NOT NULL,
    n integer NOT NULL,
    verified integer NOT NULL
);
CREATE INDEX board_failures_board ON fieldtool.board_failures (profile, board);
CREATE TABLE fieldtool.board_repeats (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    designator text COLLATE "C" NOT NULL,
    modes text[] NOT NULL,
    times text[] NOT NULL,
    shortest float8
);
CREATE INDEX board_repeats_board ON fieldtool.board_repeats (profile, board);
CREATE TABLE fieldtool.board_view (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    repairs integer NOT NULL,
    first text COLLATE "C" NOT NULL,
    last text COLLATE "C" NOT NULL,
    gaps float8[],
    PRIMARY KEY (profile, board)
);

CREATE FUNCTION fieldtool.append_only() RETURNS trigger
LANGUAGE plpgsql SET search_path = pg_catalog, pg_temp AS $$
BEGIN
    RAISE EXCEPTION 'fieldtool store records are append-only: % refused', TG_OP
        USING ERRCODE = 'insufficient_privilege',
        HINT = 'records are only ever added; a conflicting record is kept beside the other';
END $$;
CREATE TRIGGER records_append_only BEFORE UPDATE OR DELETE OR TRUNCATE ON fieldtool.records
FOR EACH STATEMENT EXECUTE FUNCTION fieldtool.append_only();
"""

MIGRATIONS: tuple[str, ...] = (_V1,)  # MIGRATIONS[v]: version v -> v + 1
LATEST = len(MIGRATIONS)


def days(micros: str) -> str:
    """SQL for microseconds as days, rounded as Python's ``timedelta.total_seconds() / 86400``."""
    return f"((({micros})::numeric / 1000000)::float8 / 86400)"


def confirmed_filter(schema: str, targets: str, target_modes: str, part_modes: str) -> str:
    """SQL keeping the ``repairs`` rows (alias r) that confirm a failure (history.sessions)."""
    return f"""r.schema_version <= {schema} AND r.designator <> ''
        AND CASE WHEN r.designator = ANY({targets})
            THEN r.designator || ':' || r.mode = ANY({target_modes})
            ELSE r.mode = ANY({part_modes}) END"""


def catalogue() -> dict[str, object]:
    """This fieldtool's fault catalogue and record schema, as query parameters."""
    return {
        "schema": SCHEMA,
        "targets": sorted(TARGET_MODES),
        "target_modes": sorted(f"{t}:{m}" for t, modes in TARGET_MODES.items() for m in modes),
        "part_modes": sorted(PART_MODES),
    }


def _baked_filter() -> str:
    c = catalogue()
    return confirmed_filter(
        str(c["schema"]), _array(c["targets"]), _array(c["target_modes"]), _array(c["part_modes"])
    )


def board_counts(target: str, boards: str, confirmed: str) -> list[str]:
    """SQL rebuilding ``board_failures``, ``board_repeats`` and ``board_view`` in ``target``.

    Args:
        target: the schema holding those tables (``fieldtool``, or ``pg_temp`` at read time).
        boards: a query giving the (profile, board) pairs to rebuild.
        confirmed: ``confirmed_filter``'s condition on ``fieldtool.repairs r``.

    Returns:
        Two statements: the old rows go, then the new ones come (one statement cannot do
        both on a table with a unique key).
    """
    gone = "x USING touched WHERE x.profile = touched.profile AND x.board = touched.board"
    return [
        f"""
WITH touched AS ({boards}),
failures_gone AS (DELETE FROM {target}.board_failures {gone}),
repeats_gone AS (DELETE FROM {target}.board_repeats {gone})
DELETE FROM {target}.board_view {gone}""",
        f"""
WITH touched AS ({boards}),
confirmed AS (
    SELECT r.profile, r.board, r.session, r.start, r.start_us, r.first_tk, r.designator,
        r.mode, bool_or(r.verified) AS verified, min(r.tk) AS tk1, min(r.seq) AS seq1
    FROM touched JOIN fieldtool.repairs r
        ON r.profile = touched.profile AND r.board = touched.board
    WHERE {confirmed}
    GROUP BY r.profile, r.board, r.session, r.start, r.start_us, r.first_tk, r.designator, r.mode
), failures_new AS (
    INSERT INTO {target}.board_failures
    SELECT profile, board, designator, mode, count(*), count(*) FILTER (WHERE verified)
    FROM confirmed GROUP BY profile, board, designator, mode
), repeats_new AS (
    INSERT INTO {target}.board_repeats
    SELECT profile, board, designator, array_agg(mode ORDER BY o), array_agg(start ORDER BY o),
        min(gap)
    FROM (
        SELECT profile, board, designator, mode, start, row_number() OVER w AS o,
            {days("start_us - lag(start_us) OVER w")} AS gap
        FROM confirmed
        WINDOW w AS (PARTITION BY profile, board, designator
                     ORDER BY start, first_tk, session, tk1, seq1)
    ) part
    GROUP BY profile, board, designator HAVING count(*) > 1
), repair AS (
    SELECT DISTINCT profile, board, session, start, start_us, first_tk FROM confirmed
)
INSERT INTO {target}.board_view
SELECT profile, board, count(*), min(start), max(start),
    array_agg(gap ORDER BY o) FILTER (WHERE gap IS NOT NULL)
FROM (
    SELECT profile, board, start, row_number() OVER w AS o,
        {days("start_us")} - lag({days("start_us")}) OVER w AS gap
    FROM repair
    WINDOW w AS (PARTITION BY profile, board ORDER BY start, first_tk, session)
) one_board
GROUP BY profile, board""",
    ]


def _derived(added: str) -> list[str]:
    """The statements that bring the summaries up to date for the records in ``added``."""
    closing = "kind = " + _literal(SessionClosed.kind)
    opening = "kind = " + _literal(SessionOpened.kind)
    later = """excluded.closed_tk IS NOT NULL AND (s.closed_tk IS NULL
            OR (excluded.closed_tk, excluded.closed_seq) > (s.closed_tk, s.closed_seq))"""
    fleet_kinds = f"session IS NOT NULL AND kind NOT IN ({_SKIPPED})"
    return [
        f"""
INSERT INTO fieldtool.boards AS b (profile, board, records, legacy)
SELECT profile, board, count(*), count(*) FILTER (WHERE session IS NULL)
FROM {added} GROUP BY profile, board ORDER BY profile, board
ON CONFLICT (profile, board) DO UPDATE
SET records = b.records + excluded.records, legacy = b.legacy + excluded.legacy""",
        f"""
WITH summary AS (
    SELECT profile, board, session, min(tk) AS first_tk, min(us) AS first_us,
        min(tk) FILTER (WHERE {opening}) AS opened_tk,
        min(us) FILTER (WHERE {opening}) AS opened_us,
        max(tk) FILTER (WHERE kind = {_literal(Verification.kind)}) AS verified_tk,
        -- the latest closing by (time, arrival): arrays compare element by element
        max(ARRAY[tk, lpad(seq::text, 19, '0') COLLATE "C", outcome])
            FILTER (WHERE {closing}) AS closed
    FROM {added} WHERE {fleet_kinds}
    GROUP BY profile, board, session
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
        f"""
INSERT INTO fieldtool.actions
    (profile, board, session, seq, tk, designator, mode, schema_version)
SELECT profile, board, session, seq, tk, designator, mode, schema_version
FROM {added} WHERE kind = {_literal(Action.kind)} AND session IS NOT NULL
    AND designator IS NOT NULL AND mode IS NOT NULL""",
        f"""
WITH touched AS (SELECT DISTINCT profile, board, session FROM {added} WHERE {fleet_kinds}),
gone AS (
    DELETE FROM fieldtool.repairs r USING touched t
    WHERE r.profile = t.profile AND r.board = t.board AND r.session = t.session
)
INSERT INTO fieldtool.repairs
SELECT a.profile, a.board, a.session, coalesce(s.opened_tk, s.first_tk),
    CASE WHEN s.opened_tk IS NULL THEN s.first_us ELSE s.opened_us END, s.first_tk,
    a.seq, a.tk, a.designator, a.mode, a.schema_version, coalesce(s.verified_tk >= a.tk, false)
FROM touched t
JOIN fieldtool.sessions s ON s.profile = t.profile AND s.board = t.board AND s.session = t.session
JOIN fieldtool.actions a ON a.profile = t.profile AND a.board = t.board AND a.session = t.session
WHERE s.closed_tk IS NOT NULL AND s.outcome = 'fixed'""",
    ]


def _fingerprint(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


DERIVED = _fingerprint("".join(_derived("added")))
CATALOGUE = _fingerprint("".join(board_counts("fieldtool", "added", _baked_filter())))


def _trigger_sql() -> str:
    """The insert trigger: every summary statement, then the per-board counts, baked."""
    touched = "SELECT DISTINCT profile, board FROM added"
    body = ";\n".join(_derived("added") + board_counts("fieldtool", touched, _baked_filter()))
    return f"""
CREATE OR REPLACE FUNCTION fieldtool.records_added() RETURNS trigger
LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, pg_temp
-- A push's batch touches a few boards of many: reach their rows by index, never by scanning
-- whole summary tables (which would make a large first push quadratic).
SET enable_seqscan = off SET enable_hashjoin = off SET enable_mergejoin = off AS $$
BEGIN
    -- Board rows first, in one order: pushes touching the same board take turns here, so
    -- each statement below sees what the other one committed. No temporary table in here:
    -- a definer's function must not touch objects the caller could have made.
{body};
    RETURN NULL;
END $$;
DROP TRIGGER IF EXISTS records_added ON fieldtool.records;
CREATE TRIGGER records_added AFTER INSERT ON fieldtool.records
REFERENCING NEW TABLE AS added FOR EACH STATEMENT EXECUTE FUNCTION fieldtool.records_added();
"""


def _meta(conn, key: str) -> str | None:
    row = conn.execute("SELECT value FROM fieldtool.meta WHERE key = %s", (key,)).fetchone()
    return row[0] if row else None


def _set_meta(conn, key: str, value: str) -> None:
    conn.execute(
        "INSERT INTO fieldtool.meta VALUES (%s, %s) "
        "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
        (key, value),
    )


def current_version(conn) -> int:
    """The store's schema version; 0 when the database holds no store yet."""
    found = conn.execute("SELECT to_regclass('fieldtool.meta') IS NOT NULL").fetchone()[0]
    if not found:
        return 0
    value = _meta(conn, "schema_version")
    if value is None or not value.isdigit():
        raise StoreSchemaError(
            "the schema 'fieldtool' exists but holds no schema version; it was not made by "
            "'fieldtool store init' (use another database, or drop that schema)"
        )
    return int(value)


def check_version(conn, shown: str) -> None:
    """Refuse a database that is not a store of this version (with what to do about it)."""
    version = current_version(conn)
    if version == 0:
        raise StoreSchemaError(
            f"{shown} holds no fieldtool store yet; an administrator creates it with "
            f"'fieldtool store init --store URL'"
        )
    if version > LATEST:
        raise StoreSchemaError(
            f"the store at {shown} is at schema version {version}, newer than this fieldtool "
            f"knows ({LATEST}); upgrade fieldtool"
        )
    if version < LATEST:
        raise StoreSchemaError(
            f"the store at {shown} is at schema version {version}, this fieldtool needs "
            f"{LATEST}; an administrator upgrades it with 'fieldtool store init --store URL'"
        )


def summaries_match(conn, shown: str) -> bool:
    """Whether the store's per-board counts were made with this fieldtool's catalogue.

    Raises:
        StoreSchemaError: its sessions are summarised by rules this version does not share.
    """
    if _meta(conn, "derived") != DERIVED:
        raise StoreSchemaError(
            f"the store at {shown} summarises sessions as another fieldtool version does; "
            "an administrator rebuilds the summaries with 'fieldtool store init --store URL'"
        )
    return _meta(conn, "catalogue") == CATALOGUE


def migrate(conn) -> tuple[int, int, bool]:
    """Create or upgrade the store in one transaction.

    Returns:
        (version before, version after, whether the summaries were rebuilt).
    """
    with conn.transaction():
        conn.execute("SELECT pg_advisory_xact_lock(hashtext('fieldtool store init'))")
        server = conn.info.server_version
        if server < MIN_SERVER:
            raise StoreSchemaError(
                f"the server is PostgreSQL {server // 10000}; a store needs 14 or newer"
            )
        encoding = conn.execute("SELECT current_setting('server_encoding')").fetchone()[0]
        if encoding != "UTF8":
            raise StoreSchemaError(
                f"the database's encoding is {encoding}; a store needs UTF8 (CREATE DATABASE "
                "... ENCODING 'UTF8' TEMPLATE template0)"
            )
        before = current_version(conn)
        if before > LATEST:
            raise StoreSchemaError(
                f"the store is at schema version {before}, newer than this fieldtool knows "
                f"({LATEST}); upgrade fieldtool"
            )
        for step in MIGRATIONS[before:]:
            conn.execute(step)
        if before == 0:
            _set_meta(conn, "store_id", uuid.uuid4().hex)
        _set_meta(conn, "schema_version", str(LATEST))
        rebuilt = _meta(conn, "derived") != DERIVED or _meta(conn, "catalogue") != CATALOGUE
        if rebuilt:
            _rebuild(conn)
    return before, LATEST, rebuilt and before > 0


def _rebuild(conn) -> None:
    """Install this version's trigger and rebuild every summary from the records."""
    conn.execute(_trigger_sql())
    conn.execute(
        "TRUNCATE fieldtool.boards, fieldtool.sessions, fieldtool.actions, fieldtool.repairs, "
        "fieldtool.board_failures, fieldtool.board_repeats, fieldtool.board_view"
    )
    for statement in _derived("fieldtool.records"):
        conn.execute(statement)
    everything = "SELECT profile, board FROM fieldtool.boards"
    for statement in board_counts("fieldtool", everything, _baked_filter()):
        conn.execute(statement)
    _set_meta(conn, "derived", DERIVED)
    _set_meta(conn, "catalogue", CATALOGUE)


def technician_sql(database: str, owner: str, role: str = TECHNICIAN_ROLE) -> str:
    """The SQL an administrator runs once to create the technicians' append-only role."""

    def ident(name: str) -> str:
        return '"' + name.replace('"', '""') + '"'

    r, db, own = ident(role), ident(database), ident(owner)
    return f"""-- Run once as an administrator (the store's owner or a superuser) in database {db}.
CREATE ROLE {r} NOLOGIN;
GRANT CONNECT, TEMPORARY ON DATABASE {db} TO {r};
GRANT USAGE ON SCHEMA fieldtool TO {r};
GRANT SELECT ON ALL TABLES IN SCHEMA fieldtool TO {r};
GRANT INSERT ON fieldtool.records TO {r};
REVOKE UPDATE, DELETE, TRUNCATE ON ALL TABLES IN SCHEMA fieldtool FROM {r};
ALTER DEFAULT PRIVILEGES FOR ROLE {own} IN SCHEMA fieldtool GRANT SELECT ON TABLES TO {r};
-- Then one login per technician (the password goes in the laptop's ~/.pgpass, never in a
-- fieldtool setting), for example:
--   CREATE ROLE ana LOGIN IN ROLE {r};
--   \\password ana"""
