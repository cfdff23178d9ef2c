"""Confirmed failures for the diagnosis priors: from the store when one is set, else the files.

A technician must never be blocked by the network: when the store cannot be reached (or is
not usable), the local files give the counts and ``notice`` says so, in one line.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from fieldtool.core.history.fleet import confirmed_failures as files_confirmed
from fieldtool.core.session import FailureSource
from fieldtool.store.config import StoreAddress
from fieldtool.store.errors import StoreError
from fieldtool.store.fleet import confirmed_failures as store_confirmed

QUERY_TIMEOUT_S = 10.0  # a store that answers this slowly is treated as unreachable


@dataclass(frozen=True)
class FleetCounts:
    """Confirmed failures of one board type, where they came from, and what to tell."""

    counts: dict[tuple[str, str], int]
    source: str  # "store", "files" or "none"
    notice: str | None = None


def fleet_counts(
    store: StoreAddress | None, logs_dir: Path | str | None, profile_name: str
) -> FleetCounts:
    """Counts from ``store``, falling back to ``logs_dir`` (with a notice) if it fails.

    Raises:
        HistoryError: only from the local files, as ``history.fleet.confirmed_failures`` does.
    """
    notice = None
    if store is not None:
        try:
            counts = store_confirmed(store, profile_name, statement_timeout_s=QUERY_TIMEOUT_S)
            return FleetCounts(counts, "store")
        except StoreError as exc:
            notice = f"fleet store not used ({exc.message})"
    local = Path(logs_dir) if logs_dir is not None else None
    if local is None or not local.is_dir():
        if notice:
            notice += "; published priors"
        return FleetCounts({}, "none", notice)
    if notice:
        notice += f"; fleet priors from the local files in {local}"
    return FleetCounts(files_confirmed(local, profile_name), "files", notice)


def store_failures(
    store: StoreAddress | None,
    logs_dir: Path | str | None,
    notify: Callable[[str], None] | None = None,
) -> FailureSource:
    """Where ``core.session.choose_priors`` takes confirmed failures from: ``fleet_counts``,
    with its notice (if any) handed to ``notify``."""

    def confirmed(profile_name: str) -> dict[tuple[str, str], int]:
        counts = fleet_counts(store, logs_dir, profile_name)
        if counts.notice and notify is not None:
            notify(counts.notice)
        return counts.counts

    return confirmed
