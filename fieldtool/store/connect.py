"""Connecting to the store through psycopg 3, and turning its errors into the store's own.

psycopg is imported here only, when a connection is made, so a technician who works with
files alone needs nothing more than fieldtool. Every psycopg error is converted in one place
(``translated``), by type, into a ``StoreError`` whose message holds no password.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from fieldtool.store.config import INSTALL_HINT, StoreAddress, redact
from fieldtool.store.errors import (
    StoreError,
    StoreSettingsError,
    StoreUnavailable,
)
from fieldtool.store.schema import check_version

CONNECT_TIMEOUT_S = 3  # unless the address sets connect_timeout; offline must not mean waiting


def driver() -> Any:
    """The psycopg module, or a one-line error saying what to install."""
    try:
        import psycopg
    except ModuleNotFoundError:
        raise StoreSettingsError(
            f"a store needs the PostgreSQL driver psycopg: {INSTALL_HINT}"
        ) from None
    return psycopg


def _reason(exc: BaseException) -> str:
    lines = [line.strip() for line in str(exc).strip().splitlines() if line.strip()]
    return redact(lines[0]) if lines else type(exc).__name__


AGAIN = "run the same command again"


@contextmanager
def translated(address: StoreAddress, then: str = AGAIN) -> Iterator[None]:
    """Inside: psycopg errors become StoreErrors naming the store (password hidden).

    Args:
        then: what to do after a lost connection, appended to its message (may be empty).
    """
    psycopg = driver()
    try:
        yield
    except psycopg.errors.QueryCanceled as exc:
        raise StoreUnavailable(
            f"the store at {address.shown} took too long and the query was stopped "
            f"({_reason(exc)}); try again later"
        ) from None
    except psycopg.OperationalError as exc:
        lost = f"lost the connection to the store at {address.shown} ({_reason(exc)})"
        raise StoreUnavailable(f"{lost}; {then}" if then else lost) from None
    except psycopg.errors.InsufficientPrivilege as exc:
        raise StoreError(
            f"the store at {address.shown} refused: {_reason(exc)}; ask its administrator "
            "for the technician role (see 'fieldtool store init')"
        ) from None
    except psycopg.Error as exc:
        raise StoreError(f"the store at {address.shown} said: {_reason(exc)}") from None


@contextmanager
def connected(
    address: StoreAddress,
    *,
    check: bool = True,
    statement_timeout_s: float | None = None,
    then: str = AGAIN,
) -> Iterator[Any]:
    """An autocommit psycopg connection to the store, checked to be a store of this version.

    Raises:
        StoreSettingsError: psycopg is not installed.
        StoreUnavailable: the server cannot be reached within the connect timeout.
        StoreSchemaError: the database holds no store, or one of another version.
    """
    psycopg = driver()
    options: dict[str, Any] = {"application_name": "fieldtool", "client_encoding": "UTF8"}
    try:
        given = psycopg.conninfo.conninfo_to_dict(address.conninfo)
    except psycopg.ProgrammingError as exc:
        raise StoreSettingsError(
            f"{address.origin}: {address.shown!r} is not a postgresql:// URL or libpq "
            f"connection string ({_reason(exc)})"
        ) from None
    if "connect_timeout" not in given:
        options["connect_timeout"] = CONNECT_TIMEOUT_S
    try:
        conn = psycopg.connect(address.conninfo, autocommit=True, **options)
    except psycopg.Error as exc:
        raise StoreUnavailable(
            f"cannot connect to the store at {address.shown}: {_reason(exc)}"
        ) from None
    try:
        with translated(address, then):
            if statement_timeout_s is not None:
                ms = max(1, round(statement_timeout_s * 1000))
                conn.execute(f"SET statement_timeout = {ms:d}")
            if check:
                check_version(conn, address.shown)
            yield conn
    finally:
        conn.close()
