"""History commands: ``history``, ``logs merge``, ``fleet``, ``report`` and ``record``.

Each is a thin shell over ``fieldtool.core`` (history store, merge, fleet view, report).
The logs folder is ``--logs DIR``, else ``$FIELDTOOL_LOGS``, else ``./logs``.
"""

from __future__ import annotations

import argparse
import difflib
import json
import os
from collections import Counter
from collections.abc import Callable
from pathlib import Path

from fieldtool.commands import store as store_commands
from fieldtool.commands.boards import existing_logs, load_board, profile_arg
from fieldtool.commands.history_text import fleet_text, merge_json, merge_text, safe, timeline
from fieldtool.commands.store import add_store_option, notice, store_of
from fieldtool.core.circuit.library import (
    available,
    find_profile,
    looks_like_path,
    user_profiles_dir,
)
from fieldtool.core.errors import FieldtoolError, InputError, shown
from fieldtool.core.history import (
    ENV_VAR,
    OUTCOMES,
    BoardHistory,
    HistoryError,
    NotFoundError,
    check_name,
    resolve_logs_dir,
)
from fieldtool.core.history.fleet import (
    FleetView,
    ViewParts,
    finish_view,
    fleet_view,
    profiles_with_histories,
)
from fieldtool.core.history.merge import merge
from fieldtool.core.history.sessions import confirmed_in, group_sessions
from fieldtool.core.measurement import Measurement
from fieldtool.store import ENV_VAR as STORE_ENV
from fieldtool.store import StoreAddress, StoreUnavailable
from fieldtool.store import fleet as store_fleet
from fieldtool.store import read as store_read

LOGS_HELP = f"logs folder (default: ${ENV_VAR}, else ./logs)"
STORE_READ_HELP = (
    f"read the fleet store instead of the files (default: ${STORE_ENV} unless --logs is given); "
    "a postgresql:// URL, a libpq connection string or a store settings .toml"
)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the history subcommands."""
    p = subparsers.add_parser(
        "history", help="one board's timeline", description="A board's history, oldest first."
    )
    p.add_argument("serial", help="board serial, e.g. TG-0042")
    p.add_argument("--logs", help=LOGS_HELP)
    add_store_option(p, STORE_READ_HELP)
    p.add_argument("--json", action="store_true", help="one JSON object on stdout")
    p.set_defaults(handler=run_history)

    logs = subparsers.add_parser("logs", help="manage logs folders (merge)")
    logs.set_defaults(handler=_logs_without_subcommand)
    actions = logs.add_subparsers(dest="logs_command", parser_class=subparsers._parser_class)
    m = actions.add_parser(
        "merge",
        help="merge another logs folder (e.g. a laptop's) into this one",
        description="Union of records by id; merging twice changes nothing; nothing is "
        "dropped or rewritten; the same id with different content is kept and reported.",
    )
    m.add_argument("src_dir", help="the logs folder to merge from (it is not changed)")
    m.add_argument("--logs", help=f"the folder to merge into (default: ${ENV_VAR}, else ./logs)")
    m.add_argument("--json", action="store_true", help="one JSON object on stdout")
    m.set_defaults(handler=run_merge)
    store_commands.register_logs(actions, LOGS_HELP)

    f = subparsers.add_parser(
        "fleet",
        help="which parts fail on one board type, across its boards",
        description="Confirmed failures by designator and mode, repeat repairs, time between "
        "repairs and boards with recurring faults, for one profile.",
    )
    f.add_argument("profile", help="profile name (e.g. tidegauge-apd-bias) or its .toml file")
    f.add_argument("--logs", help=LOGS_HELP)
    add_store_option(f, STORE_READ_HELP)
    f.add_argument("--json", action="store_true", help="one JSON object on stdout")
    f.set_defaults(handler=run_fleet)

    from fieldtool.commands import history_record, history_report

    history_report.register(subparsers, LOGS_HELP)
    history_record.register(subparsers, LOGS_HELP, OUTCOMES)


def _logs_without_subcommand(args: argparse.Namespace) -> int:
    raise InputError(
        "'fieldtool logs' needs a subcommand: merge, push or pull (see 'fieldtool logs --help')"
    )


def _conflicts(history) -> list[str]:
    seen: dict[str, dict] = {}
    clashes = []
    for record in history.events:
        body = record.to_dict()
        if record.id in seen and seen[record.id] != body and record.id not in clashes:
            clashes.append(record.id)
        seen.setdefault(record.id, body)
    return clashes


def _reading_store(args: argparse.Namespace) -> StoreAddress | None:
    """The store ``history`` and ``fleet`` read: ``--store``, else the environment's unless
    ``--logs`` names a folder."""
    if args.logs and not args.store:
        return None
    return store_of(args)


def _from_store(args: argparse.Namespace, read_store, read_files):
    """``read_store(address)`` when a store is set; the local files when it is unreachable."""
    address = _reading_store(args)
    if address is None:
        return read_files()
    try:
        return read_store(address)
    except StoreUnavailable as exc:
        local = resolve_logs_dir(args.logs, os.environ)
        if not local.is_dir():
            raise
        notice(f"{exc.message}; showing the local files in {local}")
        return read_files()


def _beyond_the_board(history: BoardHistory) -> Callable[[Measurement], bool] | None:
    """Whether a reading is one no node of the board could show, judged on the profile the
    history names (your folder, then the shipped ones); None when it cannot be loaded."""
    names = Counter(r.profile for r in history.events if r.profile)
    if not names:
        return None
    try:
        profile = find_profile(names.most_common(1)[0][0], user_profiles_dir(os.environ))
    except FieldtoolError:
        return None
    from fieldtool.core.circuit.reading_range import reading_problem  # only when shown

    return lambda m: reading_problem(profile, m) is not None


def run_history(args: argparse.Namespace) -> int:
    """Handle ``fieldtool history``."""
    history = _from_store(
        args,
        lambda address: store_read.read_board(address, args.serial),
        lambda: load_board(existing_logs(args.logs), args.serial),
    )
    sessions = group_sessions(history.events)
    conflicts = _conflicts(history)
    if not args.json:
        print(timeline(history, sessions, conflicts, _beyond_the_board(history)))
        return 0
    out = {
        "board": history.board,
        "events": [r.to_dict() for r in history.events],
        "damaged": [vars(d) for d in history.damaged],
        "sessions": [
            {
                "id": s.id,
                "start": s.start,
                "profile": s.profile,
                "outcome": s.outcome,
                "records": [r.id for r in s.records],
                "confirmed": [vars(c) for c in confirmed_in(s)],
            }
            for s in sessions
        ],
        "conflicts": conflicts,
    }
    print(json.dumps(out, indent=2, ensure_ascii=False))
    return 0


def run_merge(args: argparse.Namespace) -> int:
    """Handle ``fieldtool logs merge``."""
    dst = resolve_logs_dir(args.logs, os.environ)
    if dst.exists() and not dst.is_dir():
        raise HistoryError(f"cannot merge into {dst}: it is a file, not a logs folder")
    report = merge(args.src_dir, dst)
    if args.json:
        out = {"src": str(args.src_dir), "dst": str(dst), **merge_json(report)}
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    head = f"merged {safe(args.src_dir)} into {safe(dst)}"
    print(merge_text(report, head, "not merged"))
    return 0


def _name_given(text: str) -> str:
    """The profile name in ``text``: a name, or the name of a ``.toml`` path's profile."""
    if looks_like_path(text):
        return profile_arg(text).name
    return check_name(text, "profile name", existing=True)


def _known_profiles() -> list[str]:
    """The board types this laptop has a profile for (the user's and the shipped ones)."""
    return [e.name for e in available(user_profiles_dir(os.environ))]


def profile_name_of(text: str, logs: Path) -> str:
    """A profile name from a name or a ``.toml`` path; a name must be a profile fieldtool knows
    or one with histories in ``logs``, so a slip is not shown as an empty fleet."""
    name = _name_given(text)
    if looks_like_path(text):
        return name
    with_histories = profiles_with_histories(logs)
    known = _known_profiles()
    if name in with_histories or name in known:
        return name
    close = difflib.get_close_matches(name, [*with_histories, *known], n=3)
    hint = f"did you mean {', '.join(close)}?" if close else "see 'fieldtool profiles'"
    raise NotFoundError(f"no profile named {shown(name)} and no histories for it in {logs}; {hint}")


def _store_fleet(address: StoreAddress, text: str) -> FleetView:
    """The fleet of a board type from the store, which may know board types this laptop has
    no profile for; a board type this laptop knows but the store holds nothing for has an
    empty fleet, as from files."""
    name = _name_given(text)
    try:
        return store_fleet.fleet_view(address, name)
    except NotFoundError:
        if name in _known_profiles():
            return finish_view(name, ViewParts())
        raise


def _files_fleet(text: str, option: str | None) -> FleetView:
    logs = existing_logs(option)
    return fleet_view(logs, profile_name_of(text, logs))


def run_fleet(args: argparse.Namespace) -> int:
    """Handle ``fieldtool fleet``; a board type with no histories yet has an empty fleet."""
    view = _from_store(
        args,
        lambda address: _store_fleet(address, args.profile),
        lambda: _files_fleet(args.profile, args.logs),
    )
    if args.json:
        print(json.dumps(view.to_json(), indent=2, ensure_ascii=False))
    else:
        print(fleet_text(view))
    return 0
