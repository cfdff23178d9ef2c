"""Start-up: a command loads only what it needs (the terminal UI never on the CLI path)."""

import importlib
import subprocess
import sys

import pytest

from fieldtool import cli
from fieldtool.cli import main


def test_the_command_table_names_the_module_that_registers_each_command():
    registered = {}
    for module in cli.COMMAND_MODULES:
        parser = cli._Parser(prog="fieldtool")
        sub = parser.add_subparsers(dest="command", parser_class=cli._Parser)
        importlib.import_module(module).register(sub)
        registered.update(dict.fromkeys(sub.choices, module))
    assert registered == cli.COMMAND_MODULE


def test_expect_and_diagnose_load_neither_the_terminal_ui_nor_the_serial_library(tmp_path):
    # Run in a fresh interpreter: the test session itself has imported everything.
    probe = (
        "import sys, atexit; from fieldtool import cli\n"
        "def report():\n"
        "    loaded = {m.split('.')[0] for m in sys.modules} & {'textual', 'serial'}\n"
        "    print('LOADED', sorted(loaded), file=sys.stderr)\n"
        "atexit.register(report)\n"
        "cli.main(sys.argv[1:])"
    )
    for argv in (["expect", "tidegauge-apd-bias"], ["diagnose", "--help"]):
        run = subprocess.run(
            [sys.executable, "-c", probe, *argv], capture_output=True, text=True, cwd=tmp_path
        )
        assert "LOADED []" in run.stderr, (argv, run.stderr[-2000:])


def test_start_screen_options_without_the_command_word_mean_the_start_screen(capsys):
    # `fieldtool` alone opens the start screen, so its options may come without `tui`
    # (common practice, no source: what a user types after reading the README's first line)
    with pytest.raises(SystemExit) as stop:
        main(["--logs", "somewhere", "--help"])
    assert stop.value.code == 0
    assert capsys.readouterr().out.startswith("usage: fieldtool tui")


def test_a_usage_error_names_the_help_to_read_without_a_doubled_space(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["no-such-command"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "(see 'fieldtool --help')" in err and "fieldtool  " not in err
