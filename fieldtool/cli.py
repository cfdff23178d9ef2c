"""Command-line entry point: non-interactive subcommands, each a thin shell over core.

Each subcommand lives in a module of ``fieldtool.commands`` exposing ``register(subparsers)``;
the handler it sets returns an exit code (``fieldtool`` alone runs the start screen's, which
``commands.tui`` sets as the default). Every ``FieldtoolError`` becomes one line on
stderr and exit code 2, so no traceback reaches a user.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from fieldtool import __version__
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.hazard import SAFETY_WARNING

COMMAND_MODULES = (
    "fieldtool.commands.expect",
    "fieldtool.commands.profiles",
    "fieldtool.commands.meters",
    "fieldtool.commands.history",
    "fieldtool.commands.diagnosis",
    "fieldtool.commands.tui",
    "fieldtool.commands.store",
)

# The module that registers each subcommand, so that a command loads only its own module and
# what that needs (start-up time: `fieldtool expect` never loads the terminal UI, the serial
# library or the history store). `fieldtool --help` and unknown words load them all.
# tests/cli/test_startup.py checks this table against what the modules register.
COMMAND_MODULE = {
    "expect": "fieldtool.commands.expect",
    "profiles": "fieldtool.commands.profiles",
    **dict.fromkeys(("ports", "read", "sim-meter"), "fieldtool.commands.meters"),
    **dict.fromkeys(("fleet", "history", "logs", "record", "report"), "fieldtool.commands.history"),
    **dict.fromkeys(
        ("calibrate", "coverage", "diagnose", "inject"), "fieldtool.commands.diagnosis"
    ),
    **dict.fromkeys(("demo", "probe", "tui"), "fieldtool.commands.tui"),
    "store": "fieldtool.commands.store",
}


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit code 2."""

    def error(self, message: str) -> None:  # pragma: no cover - exercised via main()
        see = " ".join(("fieldtool", self._sub_name(), "--help")).replace("  ", " ")
        self.exit(2, f"fieldtool: {message} (see '{see}')\n")

    def _sub_name(self) -> str:
        parts = self.prog.split()
        return " ".join(parts[1:]) if len(parts) > 1 else ""


DESCRIPTION = """\
Find the failed diode or capacitor on a voltage-multiplier board (DC-fed ladder,
Dickson charge pump, Cockcroft-Walton ladder), node by node, from what every node
should read on that board; keep safe around stored charge; keep each board's
repair history."""
EPILOG = f"""\
where to start:
  fieldtool demo                 practise on an invented board with a hidden fault
  fieldtool                      the start screen: board type, serial and meter, then probe
  fieldtool probe PROFILE --board SERIAL
                                 straight to probing one board
  fieldtool expect PROFILE       what every node of a board should read
  fieldtool profiles             the board types (profiles) you can name

Each command explains itself: fieldtool COMMAND --help.

{SAFETY_WARNING}"""


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The parser with every available subcommand registered, or only ``command``'s module's."""
    parser = _Parser(
        prog="fieldtool",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"fieldtool {__version__}")
    subparsers = parser.add_subparsers(
        dest="command", parser_class=_Parser, title="commands", metavar="COMMAND"
    )
    modules = (COMMAND_MODULE[command],) if command in COMMAND_MODULE else COMMAND_MODULES
    for name in modules:
        importlib.import_module(name).register(subparsers)  # each one always exists
    return parser


# The start screen's own options may come without its command word: `fieldtool --logs DIR`
# means `fieldtool tui --logs DIR`, as the plain `fieldtool` opens the start screen.
START_OPTIONS = ("--logs", "--technician", "--cache", "--store", "--settings")


def main(argv: list[str] | None = None) -> int:
    """Run one subcommand; return its exit code."""
    words = list(sys.argv[1:] if argv is None else argv)
    if words and words[0].split("=", 1)[0] in START_OPTIONS:
        words.insert(0, "tui")
    argv = words
    command = next((w for w in words if not w.startswith("-")), None)
    args = build_parser(command).parse_args(argv)
    if not hasattr(args, "handler"):  # only the full parser carries the start screen's default
        args = build_parser().parse_args(argv)
    try:
        return int(args.handler(args) or 0)
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
