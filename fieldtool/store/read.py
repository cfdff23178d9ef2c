"""Reading the store: one board's history, and ``logs pull``."""

from __future__ import annotations

import difflib
import tempfile
from collections import defaultdict
from pathlib import Path

from fieldtool.core.history import (
    BoardHistory,
    NotFoundError,
    board_path,
    check_name,
    parse_lines,
)
from fieldtool.core.history.merge import MergeReport, merge
from fieldtool.store.columns import from_column, to_column
from fieldtool.store.config import StoreAddress
from fieldtool.store.connect import connected


def _lines(conn, serial: str) -> list[tuple[str, str]]:
    rows = conn.execute(
        "SELECT profile, line FROM fieldtool.records WHERE board = %s ORDER BY tk, seq",
        (to_column(serial),),
    )
    return [(from_column(profile), line) for profile, line in rows]


def _missing(conn, address: StoreAddress, serial: str) -> NotFoundError:
    names = [from_column(b) for (b,) in conn.execute("SELECT DISTINCT board FROM fieldtool.boards")]
    close = difflib.get_close_matches(serial, names, n=3)
    hint = f"; did you mean {', '.join(close)}?" if close else ""
    return NotFoundError(f"no history for board {serial!r} in the store at {address.shown}{hint}")


def read_board(address: StoreAddress, serial: str) -> BoardHistory:
    """One board's whole history from the store, across profiles, oldest first."""
    check_name(serial, existing=True)
    with connected(address) as conn:
        lines = _lines(conn, serial)
        if not lines:
            raise _missing(conn, address, serial)
    data = "\n".join(line for _, line in lines).encode("utf-8")
    records, damaged = parse_lines(data, f"store:{serial}")
    return BoardHistory(board=serial, events=tuple(r for r, _ in records), damaged=tuple(damaged))


def pull(address: StoreAddress, serials: list[str], logs_dir: Path | str) -> MergeReport:
    """Bring boards' histories from the store into a logs folder, through ``logs merge``.

    The store's lines are written to a temporary folder laid out as a logs folder, which is
    then merged into ``logs_dir``: local records are never changed, conflicts are kept and
    listed as a merge lists them.
    """
    for serial in serials:
        check_name(serial, existing=True)
    with tempfile.TemporaryDirectory(prefix="fieldtool-pull-") as tmp:
        with connected(address) as conn:
            for serial in dict.fromkeys(serials):
                lines = _lines(conn, serial)
                if not lines:
                    raise _missing(conn, address, serial)
                by_profile: dict[str, list[str]] = defaultdict(list)
                for profile, line in lines:
                    by_profile[profile].append(line)
                for profile, board_lines in by_profile.items():
                    # the fleet already holds this board under this name, perhaps from an
                    # older version whose naming rule was looser: keep its name
                    path = board_path(tmp, profile, serial, existing=True)
                    path.parent.mkdir(parents=True, exist_ok=True)
                    path.write_text("\n".join(board_lines) + "\n", encoding="utf-8")
        return merge(tmp, Path(logs_dir), workers=1)
