"""The fleet view: what the histories of every board of one profile say about its parts.

Pure over the history files in ``<logs>/<profile>/``. Terms (see ``history_sessions``):

- a *confirmed failure* is an action naming a part and a catalogued failure mode in a session
  closed ``fixed``; *verified* when a verification reading followed it in that session;
- a *repair* is a session that confirmed at least one failure;
- a *repeat repair* is the same part repaired again on the same board in a later repair;
- a board with *recurring faults* needed two or more repairs;
- the *time between repairs* is measured between successive repairs of one board.

``confirmed_failures`` is what the diagnosis priors take: (designator as stored, mode) to the
number of repairs that confirmed it on that board type.
"""

from __future__ import annotations

import statistics
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from fieldtool.core.history import HistoryError, NotFoundError, check_name
from fieldtool.core.history.fleet_cache import BoardSummary, summaries

OUTCOME_ORDER = ("fixed", "not-fixed", "escalated", "open")


@dataclass(frozen=True)
class FailureCount:
    """How often one part failed one way across the fleet."""

    designator: str
    mode: str
    count: int  # repairs that confirmed it
    boards: int  # distinct boards
    verified: int  # of ``count``, how many had a verification reading after the action


@dataclass(frozen=True)
class RepeatRepair:
    """One part repaired in more than one repair of the same board."""

    board: str
    designator: str
    modes: tuple[str, ...]
    times: tuple[str, ...]
    shortest_days: float


@dataclass(frozen=True)
class RecurringBoard:
    """A board that needed two or more repairs, and the failures they confirmed."""

    board: str
    repairs: int
    failures: tuple[tuple[str, str, int], ...]  # (designator, mode, times)
    first: str
    last: str


@dataclass(frozen=True)
class Intervals:
    """Time between successive repairs of one board, over the fleet, in days."""

    count: int
    median_days: float | None
    mean_days: float | None
    shortest_days: float | None


@dataclass(frozen=True)
class FleetView:
    """Everything ``fieldtool fleet`` shows for one profile."""

    profile: str
    boards: int
    sessions: int
    outcomes: dict[str, int]
    repairs: int
    failures: tuple[FailureCount, ...]
    repeat_repairs: tuple[RepeatRepair, ...]
    intervals: Intervals
    recurring_boards: tuple[RecurringBoard, ...]
    damaged_lines: int

    def to_json(self) -> dict[str, Any]:
        """The JSON shape of ``fieldtool fleet --json``."""
        return {
            "profile": self.profile,
            "boards": self.boards,
            "sessions": self.sessions,
            "outcomes": self.outcomes,
            "repairs": self.repairs,
            "confirmed_failures": [vars(f) for f in self.failures],
            "repeat_repairs": [
                {**vars(r), "modes": list(r.modes), "times": list(r.times)}
                for r in self.repeat_repairs
            ],
            "time_between_repairs": vars(self.intervals),
            "recurring_boards": [
                {**vars(b), "failures": [list(f) for f in b.failures]}
                for b in self.recurring_boards
            ],
            "damaged_lines": self.damaged_lines,
        }


def profile_folder(logs_dir: Path | str, profile_name: str) -> Path:
    """The folder holding one profile's board histories (it may not exist yet); a clear error
    when the logs folder itself is missing."""
    root = Path(logs_dir)
    profile_name = check_name(profile_name, "profile name", existing=True)
    if not root.exists():
        raise NotFoundError(f"logs folder {root} does not exist; pass --logs DIR")
    if not root.is_dir():
        raise HistoryError(f"logs folder {root} is not a folder; pass --logs DIR")
    return root / profile_name


def profiles_with_histories(logs_dir: Path | str) -> list[str]:
    """The profile folders of a logs folder, by name."""
    root = Path(logs_dir)
    if not root.is_dir():
        return []
    return sorted(p.name for p in root.iterdir() if p.is_dir() and not p.name.startswith("."))


def _instant(stamp: str) -> datetime:
    moment = datetime.fromisoformat(stamp)
    return moment if moment.tzinfo else moment.replace(tzinfo=UTC)


def _days(earlier: str, later: str) -> float:
    return (_instant(later) - _instant(earlier)).total_seconds() / 86400.0


def fleet_view(logs_dir: Path | str, profile_name: str, *, use_cache: bool = True) -> FleetView:
    """The fleet view of one profile (see module docstring); a board type with no histories yet
    has an empty fleet."""
    folder = profile_folder(logs_dir, profile_name)
    boards = summaries(folder, use_cache=use_cache) if folder.is_dir() else []
    return build_view(profile_name, boards)


def build_view(profile_name: str, boards: list[BoardSummary]) -> FleetView:
    """Aggregate per-board summaries into the fleet view."""
    return finish_view(profile_name, view_parts(boards))


@dataclass
class ViewParts:
    """What some boards add to a fleet view, before it is ordered (``finish_view``)."""

    boards: int = 0
    outcomes: Counter[str] = field(default_factory=Counter)
    repairs: int = 0
    # (designator, mode) -> [repairs that confirmed it, boards, of those repairs verified]
    failures: dict[tuple[str, str], list[int]] = field(default_factory=dict)
    repeats: list[RepeatRepair] = field(default_factory=list)
    recurring: list[RecurringBoard] = field(default_factory=list)
    gaps: list[float] = field(default_factory=list)  # days between successive repairs
    damaged: int = 0

    def add(self, other: ViewParts) -> None:
        """Take in the parts of other boards (never the same boards)."""
        self.boards += other.boards
        self.outcomes.update(other.outcomes)
        self.repairs += other.repairs
        for key, (count, boards, verified) in other.failures.items():
            mine = self.failures.setdefault(key, [0, 0, 0])
            mine[0], mine[1], mine[2] = mine[0] + count, mine[1] + boards, mine[2] + verified
        self.repeats += other.repeats
        self.recurring += other.recurring
        self.gaps += other.gaps
        self.damaged += other.damaged


def view_parts(boards: list[BoardSummary]) -> ViewParts:
    """What per-board summaries add to a fleet view (see module docstring for the terms)."""
    parts = ViewParts(boards=len(boards), damaged=sum(b.damaged for b in boards))
    epoch = datetime(1970, 1, 1, tzinfo=UTC)
    for board in boards:
        parts.outcomes.update(board.outcomes)
        if not board.repairs:
            continue
        parts.repairs += len(board.repairs)
        by_part: dict[str, list[tuple[str, str]]] = defaultdict(list)
        tally: Counter[tuple[str, str]] = Counter()
        for start, found in board.repairs:
            for designator, mode, checked in found:
                key = (designator, mode)
                counts = parts.failures.setdefault(key, [0, 0, 0])
                counts[0] += 1
                counts[1] += key not in tally  # one more board with this failure
                counts[2] += checked
                tally[key] += 1
                by_part[designator].append((start, mode))
        starts = [start for start, _ in board.repairs]
        days = [(_instant(t) - epoch).total_seconds() / 86400.0 for t in starts]
        parts.gaps.extend(b - a for a, b in zip(days, days[1:], strict=False))
        for designator, seen in by_part.items():
            if len(seen) > 1:
                times = tuple(t for t, _ in seen)
                shortest = min(_days(a, b) for a, b in zip(times, times[1:], strict=False))
                modes = tuple(m for _, m in seen)
                parts.repeats.append(RepeatRepair(board.board, designator, modes, times, shortest))
        if len(board.repairs) > 1:
            failures = tuple((d, m, n) for (d, m), n in sorted(tally.items()))
            parts.recurring.append(
                RecurringBoard(board.board, len(board.repairs), failures, starts[0], starts[-1])
            )
    return parts


def finish_view(profile_name: str, parts: ViewParts) -> FleetView:
    """Order and total the parts into the view (shared with the store's queries)."""
    failures = sorted(
        (FailureCount(d, m, *counts) for (d, m), counts in parts.failures.items()),
        key=lambda f: (-f.count, f.designator, f.mode),
    )
    repeats = sorted(
        parts.repeats, key=lambda r: (-len(r.times), r.shortest_days, r.board, r.designator)
    )
    recurring = sorted(parts.recurring, key=lambda b: (-b.repairs, b.board))
    gaps = parts.gaps
    intervals = Intervals(
        count=len(gaps),
        median_days=statistics.median(gaps) if gaps else None,
        mean_days=statistics.fmean(gaps) if gaps else None,
        shortest_days=min(gaps) if gaps else None,
    )
    outcomes = parts.outcomes
    ordered = {k: outcomes[k] for k in OUTCOME_ORDER if outcomes[k]}
    ordered.update({k: v for k, v in sorted(outcomes.items()) if k not in ordered})
    return FleetView(
        profile=profile_name,
        boards=parts.boards,
        sessions=sum(outcomes.values()),
        outcomes=ordered,
        repairs=parts.repairs,
        failures=tuple(failures),
        repeat_repairs=tuple(repeats),
        intervals=intervals,
        recurring_boards=tuple(recurring),
        damaged_lines=parts.damaged,
    )


def confirmed_failures(logs_dir: Path | str, profile_name: str) -> dict[tuple[str, str], int]:
    """Confirmed failures of one board type: (designator as stored, mode) → count.

    A profile without histories yet has none (an empty mapping), so the priors stay published.
    """
    try:
        view = fleet_view(logs_dir, profile_name)
    except NotFoundError:
        return {}
    return {(f.designator, f.mode): f.count for f in view.failures}
