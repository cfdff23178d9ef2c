"""``fieldtool store init``, ``logs push`` and ``logs pull``: the shared fleet store.

The store is ``--store URL``, else ``$FIELDTOOL_STORE``; passwords come from libpq's password
file, service file or environment, never from fieldtool (see ``fieldtool.store.config``).
"""

from __future__ import annotations

import argparse
import json
import os
import sys

from fieldtool.commands.history_text import merge_json, merge_text, safe
from fieldtool.core.history import ENV_VAR as LOGS_ENV
from fieldtool.core.history import resolve_logs_dir
from fieldtool.store import ENV_VAR, StoreAddress, StoreSettingsError, resolve_store
from fieldtool.store.schema import TECHNICIAN_ROLE

STORE_HELP = (
    f"fleet store: a postgresql:// URL, a libpq connection string or a store settings .toml "
    f"(default: ${ENV_VAR}); passwords go in ~/.pgpass"
)

PRIORS_STORE_HELP = (
    f"fleet store whose confirmed repairs set the priors (default: ${ENV_VAR}); when it cannot "
    "be reached, the local history folder is used and a notice says so"
)


def add_store_option(parser: argparse.ArgumentParser, help_text: str = STORE_HELP) -> None:
    """Give a command the ``--store`` option."""
    parser.add_argument("--store", metavar="URL", help=help_text)


def store_of(args: argparse.Namespace) -> StoreAddress | None:
    """The store a command was given (``--store``, else the environment), or None."""
    return resolve_store(getattr(args, "store", None), os.environ)


def required_store(args: argparse.Namespace) -> StoreAddress:
    """The store a command needs; a clear error when none is given."""
    address = store_of(args)
    if address is None:
        raise StoreSettingsError(f"no store given: pass --store URL or set ${ENV_VAR}")
    return address


def notice(text: str) -> None:
    """One line on stderr that does not stop the command."""
    print(f"fieldtool: notice: {safe(text)}", file=sys.stderr)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``store init``."""
    store = subparsers.add_parser("store", help="set up the shared fleet store (administrators)")
    store.set_defaults(handler=_store_without_subcommand)
    actions = store.add_subparsers(dest="store_command", parser_class=subparsers._parser_class)
    init = actions.add_parser(
        "init",
        help="create or upgrade the store's tables; print the technician role's SQL",
        description="Creates the store in the database the address names, or upgrades it to "
        "this version's schema, and says what it did. Run it as the role that is to own the "
        "store. It also prints the SQL an administrator runs once to create the technicians' "
        "role, which may add and read records but never change or delete them.",
    )
    add_store_option(init)
    init.add_argument(
        "--role", default=TECHNICIAN_ROLE, help=f"technician role name (default {TECHNICIAN_ROLE})"
    )
    init.set_defaults(handler=run_init)


def register_logs(actions: argparse._SubParsersAction, logs_help: str) -> None:
    """Add ``logs push`` and ``logs pull`` beside ``logs merge``."""
    push = actions.add_parser(
        "push",
        help="send this logs folder's records to the fleet store",
        description="Sends every record the store lacks; pushing twice changes nothing. "
        "Damaged lines are listed and never sent; the same id with different content is kept "
        "and listed, as 'logs merge' does. A dropped connection loses nothing: push again.",
    )
    add_store_option(push)
    push.add_argument("--logs", help=logs_help)
    push.add_argument(
        "--all", action="store_true", help="check every file, not only those changed since"
    )
    push.add_argument("--json", action="store_true", help="one JSON object on stdout")
    push.set_defaults(handler=run_push)

    pull = actions.add_parser(
        "pull",
        help="bring boards' histories from the fleet store into this logs folder",
        description="Merges each board's records from the store into the logs folder, as "
        "'logs merge' does: local records are never changed.",
    )
    pull.add_argument("serials", nargs="+", metavar="SERIAL", help="board serial(s)")
    add_store_option(pull)
    pull.add_argument(
        "--logs", help=f"the folder to merge into (default: ${LOGS_ENV}, else ./logs)"
    )
    pull.add_argument("--json", action="store_true", help="one JSON object on stdout")
    pull.set_defaults(handler=run_pull)


def _store_without_subcommand(args: argparse.Namespace) -> int:
    raise StoreSettingsError("'fieldtool store' needs a subcommand: init (see --help)")


def run_init(args: argparse.Namespace) -> int:
    """Handle ``fieldtool store init``."""
    from fieldtool.store.connect import connected
    from fieldtool.store.schema import LATEST, migrate, technician_sql

    address = required_store(args)
    with connected(address, check=False) as conn:
        before, after, rebuilt = migrate(conn)
        database, owner = conn.execute("SELECT current_database(), current_user").fetchone()
    where = safe(address.shown)
    if before == 0:
        said = f"created the fieldtool store (schema version {LATEST}) at {where}"
    elif before < after:
        said = f"upgraded the store at {where} from schema version {before} to {after}"
    elif rebuilt:
        said = (
            f"the store at {where} is at schema version {after}; its fleet summaries were "
            "rebuilt by this fieldtool's rules and fault catalogue"
        )
    else:
        said = f"the store at {where} is already at schema version {after}; nothing changed"
    print(said)
    print()
    print(technician_sql(database, owner, args.role))
    return 0


def run_push(args: argparse.Namespace) -> int:
    """Handle ``fieldtool logs push``."""
    from fieldtool.store.push import push

    address = required_store(args)
    logs = resolve_logs_dir(args.logs, os.environ)
    report = push(address, logs, use_cursor=not args.all)
    if args.json:
        out = {"src": str(logs), "store": address.shown, **merge_json(report)}
        print(json.dumps(out, indent=2, ensure_ascii=False))
    else:
        print(merge_text(report, f"pushed {safe(logs)} to {safe(address.shown)}", "not sent"))
    return 0


def run_pull(args: argparse.Namespace) -> int:
    """Handle ``fieldtool logs pull``."""
    from fieldtool.core.history import HistoryError
    from fieldtool.store.read import pull

    address = required_store(args)
    logs = resolve_logs_dir(args.logs, os.environ)
    if logs.exists() and not logs.is_dir():
        raise HistoryError(f"cannot pull into {logs}: it is a file, not a logs folder")
    report = pull(address, args.serials, logs)
    if args.json:
        out = {"store": address.shown, "dst": str(logs), **merge_json(report)}
        print(json.dumps(out, indent=2, ensure_ascii=False))
    else:
        print(merge_text(report, f"pulled into {safe(logs)} from {safe(address.shown)}", "skipped"))
    return 0
