"""Help lists every key; the palette offers the main actions; the CLI opens the right screen."""

from __future__ import annotations

import pytest

from fieldtool.cli import build_parser, main
from fieldtool.commands import tui as tui_cmd
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.diagnosis.faults import catalog
from fieldtool.tui.app import FieldtoolApp, help_text
from fieldtool.tui.dialogs import ActionDialog, OutcomeDialog, ResumeDialog
from fieldtool.tui.help import _key
from fieldtool.tui.history import FleetScreen, HistoryScreen
from fieldtool.tui.probing import ProbingScreen
from fieldtool.tui.start import StartScreen
from tests.tui.conftest import BOARD, probing, typed_app

SCREENS = [FieldtoolApp, ProbingScreen, StartScreen, ActionDialog, OutcomeDialog, ResumeDialog]
SCREENS += [HistoryScreen, FleetScreen]


@pytest.mark.parametrize("owner", SCREENS, ids=lambda c: c.__name__)
def test_help_lists_every_key(owner):
    text = help_text()
    for binding in owner.BINDINGS:
        assert f"`{_key(binding)}`" in text, f"{owner.__name__}: {binding.key} missing from help"


async def test_palette_offers_the_main_actions(profile, cache_dir, tmp_path):
    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await probing(pilot)
        titles = {c.title for c in app.get_system_commands(screen)}
        for title, _, action in ProbingScreen.PALETTE:
            assert title in titles and callable(getattr(screen, f"action_{action}"))
        assert "Go to the next measurement" in titles and "Record a repair" in titles
        assert "Choose what to measure" in titles and "Power off or on" in titles
        assert "Start a session" not in titles  # the start screen's own command
        # The footer shows only what works now: no meter, so no accept and no reconnect.
        assert screen.check_action("accept", ()) is False
        assert screen.check_action("reconnect", ()) is False
        assert screen.check_action("repair", ()) is True


def test_no_subcommand_opens_the_start_screen():
    args = build_parser().parse_args([])
    assert args.handler is tui_cmd.run_default


def test_probe_and_demo_parse():
    args = build_parser().parse_args(["probe", str(BOARD), "--board", "TG-7", "--port", "loop://"])
    assert (args.handler, args.board, args.port) == (tui_cmd.run_probe, "TG-7", "loop://")
    args = build_parser().parse_args(["demo", "--seed", "4"])
    assert (args.handler, args.seed) == (tui_cmd.run_demo, 4)


def test_other_subcommands_keep_their_own_handlers():
    args = build_parser().parse_args(["expect", str(BOARD)])
    assert args.handler is not tui_cmd.run_default


def test_bad_serial_is_one_line_and_exit_2(capsys):
    assert main(["probe", str(BOARD), "--board", "../etc"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "path separator" in err[0]


def test_demo_fault_is_drawn_from_the_catalog_by_seed(profile):
    circuit, _ = build_circuit(profile)
    keys = {h.key for h in catalog(profile, circuit)}
    drawn = [tui_cmd.demo_fault(profile, seed) for seed in range(12)]
    assert all(f.key in keys and f.key != "healthy" for f in drawn)
    assert tui_cmd.demo_fault(profile, 3) == tui_cmd.demo_fault(profile, 3)
    assert len({f.key for f in drawn}) > 6  # seeds spread over the catalog


async def test_a_failing_worker_shows_a_dialog_not_a_traceback(tmp_path):
    from fieldtool.tui.app import make_app
    from fieldtool.tui.dialogs import ErrorDialog
    from tests.tui.conftest import until

    def broken() -> None:
        raise ZeroDivisionError("a bug")

    app = make_app(logs_dir=tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        app.run_worker(broken, thread=True, exit_on_error=False)
        await until(pilot, lambda: isinstance(app.screen, ErrorDialog), what="error dialog")
        assert app.screen.error.title == "Unexpected error"
        assert "ZeroDivisionError: a bug" in app.screen.error.message
        await pilot.press("escape")
        assert not isinstance(app.screen, ErrorDialog)


def test_the_demo_hides_only_faults_its_measurements_can_find(profile, cache_dir, dictionary):
    """Every seed's hidden fault moves some reading beyond 3× its spread from healthy (the
    faults nothing can find, such as a slightly leaky capacitor, are never drawn); the rule
    itself refuses such a fault."""
    findable = tui_cmd.demo_findable(profile, cache_dir)
    drawn = [tui_cmd.demo_fault(profile, seed, findable) for seed in range(1, 13)]
    assert all(findable(f) for f in drawn)
    everything = [
        f for h in catalog(profile, build_circuit(profile)[0]) if h.target for f in h.faults()
    ]
    hidden = [f for f in everything if not findable(f)]
    assert hidden and len(hidden) < len(everything)
