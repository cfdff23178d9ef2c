"""``fieldtool profiles``: every board profile fieldtool can find, by name."""

from __future__ import annotations

import argparse
import json
import os

from fieldtool.commands.history_text import safe
from fieldtool.core.circuit.library import available, user_profiles_dir
from fieldtool.core.errors import FieldtoolError


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``profiles`` subcommand."""
    p = subparsers.add_parser(
        "profiles",
        help="list the board profiles you can name (yours first, then the shipped ones)",
        description="List every board profile fieldtool can find: your own folder "
        "($FIELDTOOL_PROFILES, else ./profiles) first, then the profiles shipped with the tool. "
        "Any command that takes a profile accepts one of these names or a path to a .toml file.",
    )
    p.add_argument("--json", action="store_true", help="one JSON object on stdout")
    p.set_defaults(handler=run_profiles)


def run_profiles(args: argparse.Namespace) -> int:
    """Handle ``fieldtool profiles``."""
    folder = user_profiles_dir(os.environ)
    rows = []
    for entry in available(folder):
        try:
            profile = entry.load()
            about = f"{profile.topology}, {profile.stages} stages: {profile.description}"
        except FieldtoolError as exc:
            about = f"cannot be used: {exc.message}"
        rows.append((entry, about))
    if args.json:
        out = [
            {"name": e.name, "file": e.where, "shipped": e.shipped, "about": about}
            for e, about in rows
        ]
        print(json.dumps({"own_folder": str(folder), "profiles": out}, indent=2))
        return 0
    width = max((len(e.name) for e, _ in rows), default=0)
    for entry, about in rows:
        origin = "shipped" if entry.shipped else "yours  "
        print(f"{safe(entry.name):<{width}}  {origin}  {safe(about)}")
    if not any(not e.shipped for e, _ in rows):
        print(f"(no profiles of your own in {folder})")
    return 0
