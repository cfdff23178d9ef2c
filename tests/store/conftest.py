"""A real PostgreSQL server for the store's tests: one per test session, one database per test.

The server is started from the machine's binaries (Debian's ``postgresql`` package; CI installs
it in ``.ci/run``) in a temporary folder with its own port and socket, as the ``postgres``
user when the tests run as root; every test here skips, saying why, where none can be started.
Each test gets a fresh database cloned from one made by ``store init``'s own migration. The
server runs with fsync off: these tests check behaviour, never durability or speed.
"""

from __future__ import annotations

import itertools

import pytest

from tests.pg_server import Server, why_unavailable

PASSWORD_USER = "pwuser"  # the one role that must give a password (scram), for the redaction test
_numbers = itertools.count()


@pytest.fixture(scope="session")
def pg():
    """The session's server, with an initialised store database to clone."""
    reason = why_unavailable()
    if reason:
        pytest.skip(reason)
    psycopg = pytest.importorskip("psycopg", reason="psycopg is in the test extra")
    from fieldtool.store.schema import migrate

    server = Server(
        {"fsync": "off", "synchronous_commit": "off", "full_page_writes": "off"},
        hba=(f"host all {PASSWORD_USER} 127.0.0.1/32 scram-sha-256",),
    ).start()
    try:
        with psycopg.connect(server.conninfo(), autocommit=True) as conn:
            conn.execute("CREATE DATABASE store_template TEMPLATE template0 ENCODING 'UTF8'")
        with psycopg.connect(server.conninfo("store_template"), autocommit=True) as conn:
            migrate(conn)
        yield server
    finally:
        server.stop()


def new_database(pg, template: str = "store_template") -> str:
    """A fresh database on the test server; its name."""
    import psycopg

    name = f"t{next(_numbers)}"
    with psycopg.connect(pg.conninfo(), autocommit=True) as conn:
        conn.execute(f"CREATE DATABASE {name} TEMPLATE {template}")
    return name


@pytest.fixture
def store(pg):
    """An empty, initialised store of its own, addressed by a postgresql:// URL."""
    from fieldtool.store import StoreAddress

    return StoreAddress(pg.url(new_database(pg)), "--store")


@pytest.fixture
def admin(pg, store):
    """Run SQL on the test's store as the superuser: ``admin(sql, params)`` → rows."""
    import psycopg

    dbname = store.conninfo.rsplit("/", 1)[1]

    def run(sql: str, params=None):
        with psycopg.connect(pg.conninfo(dbname), autocommit=True) as conn:
            cur = conn.execute(sql, params)
            return cur.fetchall() if cur.description else []

    return run
