"""The shared fleet store: board histories of many laptops in one PostgreSQL database.

The laptop's JSON Lines files stay the offline source of truth; the store is where they are
pushed to and pulled from, and where the fleet view and the diagnosis priors can come from.
Layer: beside ``meters``; imports ``fieldtool.core`` only, and psycopg only when connecting.

- ``config``: where the store is (``--store``, ``$FIELDTOOL_STORE``), passwords kept out.
- ``connect``: psycopg connections, its errors turned into ``errors.StoreError``.
- ``schema``: tables, migrations, the technician role's SQL; ``summaries``: what the server
  keeps up to date on every insert for the fleet view.
- ``columns``: a history line as a row.
- ``push``, ``read`` (history, pull), ``fleet`` (the fleet view), ``priors`` (confirmed
  failures for the priors, falling back to the files).
"""

from fieldtool.store.config import ENV_VAR, StoreAddress, redact, resolve_store
from fieldtool.store.errors import (
    StoreError,
    StoreSchemaError,
    StoreSettingsError,
    StoreUnavailable,
)

__all__ = [
    "ENV_VAR",
    "StoreAddress",
    "StoreError",
    "StoreSchemaError",
    "StoreSettingsError",
    "StoreUnavailable",
    "redact",
    "resolve_store",
]
