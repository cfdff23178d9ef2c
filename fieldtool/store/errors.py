"""Errors from the fleet store, grouped by what the caller can do next.

FieldtoolError
└── StoreError              anything about the shared store
    ├── StoreSettingsError  fix the settings: a bad address, a password in a settings file,
    │                       the PostgreSQL driver not installed
    ├── StoreUnavailable    try again later (or work offline): cannot connect, connection lost
    └── StoreSchemaError    an administrator acts: not set up, needs an upgrade, wrong encoding

No message ever holds a password: addresses are shown through ``config.redact``.
"""

from __future__ import annotations

from fieldtool.core.errors import FieldtoolError


class StoreError(FieldtoolError):
    """Any problem with the shared fleet store."""

    title = "Store"


class StoreSettingsError(StoreError):
    """The store's address or settings cannot be used as they are."""

    title = "Store settings"


class StoreUnavailable(StoreError):
    """The store cannot be reached now, or the connection was lost."""

    title = "Store unreachable"


class StoreSchemaError(StoreError):
    """The database is not a fieldtool store this version can use."""

    title = "Store not ready"
