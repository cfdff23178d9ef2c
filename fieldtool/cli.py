"""Command-line entry point: non-interactive subcommands, each a thin shell over core.

Each subcommand lives in a module of ``fieldtool.commands`` exposing ``register(subparsers)``;
the handler it sets returns an exit code. Every ``FieldtoolError`` becomes one line on
stderr and exit code 2, so no traceback reaches a user.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from fieldtool import __version__
from fieldtool.core.errors import FieldtoolError

COMMAND_MODULES = (
    "fieldtool.commands.expect",
    "fieldtool.commands.profiles",
    "fieldtool.commands.meters",
    "fieldtool.commands.history",
    "fieldtool.commands.diagnosis",
    "fieldtool.commands.tui",
    "fieldtool.commands.store",
)


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit code 2."""

    def error(self, message: str) -> None:  # pragma: no cover - exercised via main()
        self.exit(2, f"fieldtool: {message} (see 'fieldtool {self._sub_name()} --help')\n")

    def _sub_name(self) -> str:
        parts = self.prog.split()
        return " ".join(parts[1:]) if len(parts) > 1 else ""


def build_parser() -> argparse.ArgumentParser:
    """The parser with every available subcommand registered."""
    parser = _Parser(prog="fieldtool", description=__doc__.splitlines()[0])
    parser.add_argument("--version", action="version", version=f"fieldtool {__version__}")
    subparsers = parser.add_subparsers(dest="command", parser_class=_Parser)
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:
                continue  # that feature is not built yet
            raise
        module.register(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run one subcommand; return its exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    handler = getattr(args, "handler", None)
    if handler is None:
        default = getattr(parser, "_default_handler", None)
        if default is None:
            parser.print_help()
            return 0
        handler = default
    try:
        return int(handler(args) or 0)
    except FieldtoolError as exc:
        print(f"fieldtool: {exc.title.lower()}: {exc.message}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("fieldtool: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
