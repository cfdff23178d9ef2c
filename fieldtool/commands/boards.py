"""Finding a profile, the logs folder and a board's history for a command, with errors that help."""

from __future__ import annotations

import difflib
import getpass
import os
from pathlib import Path

from fieldtool.core.circuit.library import find_profile, user_profiles_dir
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.history import (
    ENV_VAR,
    BoardHistory,
    HistoryError,
    NotFoundError,
    check_name,
    read_board,
    resolve_logs_dir,
)


def existing_logs(option: str | None) -> Path:
    """The logs folder to read; a clear error when it is missing or not a folder."""
    path = resolve_logs_dir(option, os.environ)
    if not path.exists():
        raise NotFoundError(f"logs folder {path} does not exist; pass --logs DIR or set {ENV_VAR}")
    if not path.is_dir():
        raise HistoryError(f"logs folder {path} is not a folder; pass --logs DIR")
    return path


def _known_serials(logs: Path) -> list[str]:
    serials = set()
    for folder in logs.iterdir():
        if folder.is_dir() and not folder.name.startswith("."):
            serials.update(p.stem for p in folder.glob("*.jsonl"))
    return sorted(serials)


def load_board(logs: Path, serial: str) -> BoardHistory:
    """A board's history; an unknown serial names the closest ones that exist."""
    serial = check_name(serial, existing=True)
    try:
        return read_board(logs, serial)
    except NotFoundError:
        close = difflib.get_close_matches(serial, _known_serials(logs), n=3)
        hint = f"; did you mean {', '.join(close)}?" if close else ""
        raise NotFoundError(f"no history for board {serial!r} in {logs}{hint}") from None


def login_name() -> str:
    """Who is logged in, for the history's technician field when none is given."""
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"


PROFILE_HELP = "board profile: a name (see 'fieldtool profiles') or a .toml file"


def profile_arg(text: str) -> Profile:
    """The profile a command's argument names: a .toml path, or a name looked up in your own
    profiles folder ($FIELDTOOL_PROFILES or ./profiles), then among the shipped ones."""
    return find_profile(text, user_profiles_dir(os.environ))
