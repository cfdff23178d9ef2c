"""Where the fleet store is: ``--store``, else ``$FIELDTOOL_STORE``, else none (files only).

A store is named by a libpq connection string (``host=fleet.example dbname=fieldtool``), a
``postgresql://`` URL, a libpq service (``service=fleet``), or the path of a small settings
file ending in ``.toml`` that holds ``url = "..."``. Passwords belong in libpq's password file
(``~/.pgpass``), its service file or its environment variables, never here: a settings file
whose address holds a password is refused, and every address this tool shows has its
password replaced by ``***``.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from fieldtool.store.errors import StoreSettingsError

ENV_VAR = "FIELDTOOL_STORE"
INSTALL_HINT = "pip install 'fieldtool[store]'"

_URL = re.compile(r"postgres(?:ql)?://", re.IGNORECASE)
_URL_USERINFO = re.compile(r"(postgres(?:ql)?://[^:@/?#\s]*):[^@/?#\s]*@", re.IGNORECASE)
_URL_QUERY = re.compile(r"([?&]password=)[^&#\s]*", re.IGNORECASE)
_KEYWORD = re.compile(r"(\bpassword\s*=\s*)('(?:\\.|[^'\\])*'?|\S*)")


def redact(text: str) -> str:
    """``text`` with every password in a URL or connection string replaced by ``***``."""
    if _URL.search(text):
        text = _URL_USERINFO.sub(r"\1:***@", text)
        return _URL_QUERY.sub(r"\1***", text)
    return _KEYWORD.sub(r"\1***", text)


@dataclass(frozen=True)
class StoreAddress:
    """A store's address as given, and where it came from; it never prints its password."""

    conninfo: str  # handed to libpq as it is; may hold a password: show ``shown`` instead
    origin: str  # "--store", "$FIELDTOOL_STORE" or the settings file's path

    @property
    def shown(self) -> str:
        """The address with any password replaced by ``***``."""
        return redact(self.conninfo)

    def __repr__(self) -> str:
        return f"StoreAddress({self.shown!r}, from {self.origin})"


def resolve_store(option: str | None, env: Mapping[str, str]) -> StoreAddress | None:
    """The store to use: ``--store``, else ``$FIELDTOOL_STORE``, else None (files only)."""
    if option is not None and not option.strip():
        raise StoreSettingsError("--store is empty; give a postgresql:// URL or host=H dbname=D")
    value, origin = (option, "--store") if option else (env.get(ENV_VAR, ""), f"${ENV_VAR}")
    value = value.strip()
    if not value:
        return None
    if value.endswith(".toml"):
        return StoreAddress(_read_settings_file(Path(value)), str(value))
    _check(value, origin, settings_file=False)
    return StoreAddress(value, origin)


def _read_settings_file(path: Path) -> str:
    """The ``url`` of a store settings file, refused if it holds a password."""
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise StoreSettingsError(f"cannot read store settings {path}: {exc.strerror}") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise StoreSettingsError(f"store settings {path} is not valid TOML: {exc}") from None
    unknown = sorted(set(data) - {"url"})
    if unknown:
        raise StoreSettingsError(
            f'store settings {path}: unknown key {unknown[0]!r}; the file holds only url = "..."'
        )
    url = data.get("url")
    if not isinstance(url, str) or not url.strip():
        raise StoreSettingsError(
            f'store settings {path}: no url; write url = "postgresql://user@host/dbname"'
        )
    _check(url.strip(), str(path), settings_file=True)
    return url.strip()


def _check(conninfo: str, origin: str, *, settings_file: bool) -> None:
    """Refuse an address libpq cannot read, and a password in a saved settings file."""
    try:
        from psycopg import ProgrammingError
        from psycopg import conninfo as libpq
    except ModuleNotFoundError:
        # Without the driver nothing connects; connecting says what to install.
        fields = {"password": "?"} if redact(conninfo) != conninfo else {}
    else:
        try:
            fields = libpq.conninfo_to_dict(conninfo)
        except ProgrammingError as exc:  # libpq could not parse it
            reason = redact(str(exc).strip().splitlines()[0] if str(exc).strip() else "")
            raise StoreSettingsError(
                f"{origin}: {redact(conninfo)!r} is not a postgresql:// URL or libpq connection "
                f"string ({reason})"
            ) from None
    if settings_file and fields.get("password"):
        raise StoreSettingsError(
            f"store settings {origin} hold a password; remove it and put it in ~/.pgpass "
            "(libpq's password file, mode 0600) or use a libpq service file"
        )
