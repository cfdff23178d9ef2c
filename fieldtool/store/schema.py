"""The store's tables, its forward migrations, and the technician role an administrator creates.

Everything lives in the schema ``fieldtool`` of the database the address names:

- ``records``: one row per history line, the line whole (``line``) beside the columns of
  ``columns.COLUMNS``; ``(id, version)`` is unique: version 0 is the first content seen for an
  id, 1, 2, ... are conflicting contents (kept, as ``logs merge`` keeps them). Append-only for
  everyone: a statement trigger refuses UPDATE, DELETE and TRUNCATE (an administrator who
  must remove data disables it deliberately), and the technician role has no such privilege.
- ``boards``, ``sessions``, ``actions`` and ``board_view``: what the fleet view needs, kept
  up to date by the server on every insert (``summaries``).
- ``meta``: the schema version, the store's id, and the fingerprints of the summaries' logic
  (``summaries.DERIVED``, ``summaries.SUMMARY``); ``store init`` rebuilds the summaries when
  one differs from this fieldtool's.

``MIGRATIONS[v]`` takes a store from version v to v + 1; ``store init`` applies the missing
ones in one transaction under an advisory lock.
"""

from __future__ import annotations

import uuid

from fieldtool.store.errors import StoreSchemaError
from fieldtool.store.summaries import DERIVED, SUMMARY, rebuild

TECHNICIAN_ROLE = "fieldtool_technician"
MIN_SERVER = 150000  # the oldest release the tests run against (Debian 12 ships 15)


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
CREATE TABLE fieldtool.board_view (
    profile text COLLATE "C" NOT NULL,
    board text COLLATE "C" NOT NULL,
    repairs integer NOT NULL,  -- sessions that confirmed a failure
    first text COLLATE "C",  -- the first and last repair's start
    last text COLLATE "C",
    gaps float8[],  -- days between successive repairs
    outcomes text[],  -- sessions by outcome ("open" while not closed)
    outcome_counts integer[],
    designators text[],  -- confirmed failures: part, mode, repairs, verified
    modes text[],
    counts integer[],
    verified integer[],
    repeated text[],  -- parts repaired more than once: part, shortest gap in days,
    shortest float8[],  -- how many repairs, their modes and starts (flattened)
    repeats integer[],
    repeat_modes text[],
    repeat_times text[],
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
    return _meta(conn, "summary") == SUMMARY


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
                f"the server is PostgreSQL {server // 10000}; a store needs 15 or newer"
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
        rebuilt = _meta(conn, "derived") != DERIVED or _meta(conn, "summary") != SUMMARY
        if rebuilt:
            rebuild(conn)
            _set_meta(conn, "derived", DERIVED)
            _set_meta(conn, "summary", SUMMARY)
    return before, LATEST, rebuilt and before > 0


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
