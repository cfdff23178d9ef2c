"""What the terminal UI does with input it cannot use: a value no node of this board could
show, a history an older version wrote with one in it, a technician's name, and the words and
marks that must not depend on colour alone."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

from fieldtool.core import history as hist
from fieldtool.core.hazard import SIGNAL_WORD
from fieldtool.tui.app import make_app
from fieldtool.tui.dialogs import ErrorDialog, ResumeDialog
from fieldtool.tui.node_table import NodeTable
from fieldtool.tui.start import MarkedRadioButton, StartScreen
from tests.readings import reading
from tests.tui.conftest import probing, type_reading, typed_app, until


async def test_a_huge_typed_reading_is_refused_and_nothing_saved(profile, cache_dir, tmp_path):
    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await probing(pilot)
        await type_reading(pilot, "1e300")
        assert isinstance(app.screen, ErrorDialog)
        assert "beyond what any node of this board can show" in app.screen.error.message
        await pilot.press("escape")
        assert screen.session.taken == {}
        assert screen.query_one("#entry").value == "1e300"  # kept, to be corrected
        await pilot.press("ctrl+a", "ctrl+k")  # clear the field, then a real value
        await type_reading(pilot, "15.02")
        assert screen.session.volts_by_node() == {"S0": 15.02}
        app.writer.drain(10.0)
    values = [
        r.event.measurement.value
        for r in hist.read_board(tmp_path, "TG-0042").events
        if r.kind == "reading"
    ]
    assert values == [15.02]


def _older_history(logs, profile) -> None:
    """An unclosed session an older version wrote: a reading of 1e300 at S4 (let through
    then), and a reading whose value is JSON NaN (an older writer's json.dumps allowed it)."""
    t0 = datetime(2026, 11, 30, 9, 0, tzinfo=UTC)
    opened = hist.SessionOpened(technician="AB", profile_hash=profile.digest, tool_version="0.1")
    events = [opened, reading("S0", 15.0), reading("S4", 1e300), reading("S8", 96.3)]
    for i, event in enumerate(events):
        hist.append(
            logs,
            profile.name,
            "TG-0042",
            event,
            time=t0 + timedelta(minutes=i),
            session=opened.session_id,
        )
    path = hist.board_path(logs, profile.name, "TG-0042")
    lines = path.read_text().splitlines()
    nan = json.loads(lines[-1])
    nan["id"], nan["value"] = "nan-record", "NaN-PLACEHOLDER"
    nan["at"] = "S2"
    text = json.dumps(nan).replace('"NaN-PLACEHOLDER"', "NaN")
    path.write_text("\n".join([*lines, text]) + "\n")


async def test_a_history_with_values_an_older_version_let_through_still_resumes(
    profile, cache_dir, tmp_path
):
    _older_history(tmp_path, profile)
    app = typed_app(profile, tmp_path, cache_dir, resume=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, ResumeDialog), what="resume question")
        # Three readings come back; the NaN record is not one of them.
        assert "(3 readings, 0 repairs recorded)" in app.screen.text
        await pilot.press("r")
        screen = await probing(pilot)
        # The absurd value is shown, left out of the ranking, and the fit check says why.
        assert screen.session.volts_by_node()["S4"] == 1e300
        assert "S2" not in screen.session.volts_by_node()  # the NaN record is not a reading
        fit = screen.session.diagnosis.fit
        assert fit.no_fit and fit.worst_node == "S4" and "wrong range, unit or node?" in fit.text
        screen.query_one(NodeTable).select("S4")
        await pilot.pause()
        row = screen.query_one(NodeTable).render().plain.splitlines()[-1]
        assert row.startswith("▶S4") and "1e300" in row and "? range?" in row
        # The safety figures use the expected value there, not 1e300.
        await until(pilot, lambda: screen.figures is not None, what="safety figures")
        assert screen.figures.stored_energy_j < 10.0
        # A new reading at S4 replaces it.
        screen.query_one(NodeTable).select("S4")
        await pilot.pause()
        await type_reading(pilot, "70.3")
        assert screen.session.volts_by_node()["S4"] == 70.3
        assert "wrong range" not in screen.session.diagnosis.fit.text
        app.writer.drain(10.0)


async def test_the_start_screen_signs_with_the_login_name_and_lets_it_change(tmp_path, profile):
    app = make_app(logs_dir=tmp_path, technician="jdoe")
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, StartScreen), what="start screen")
        start = app.screen
        field = start.query_one("#technician")
        assert field.value == "jdoe"
        field.value = "   "
        start.query_one("#serial").value = "TG-0042"
        start.action_start()
        await pilot.pause()
        assert isinstance(app.screen, ErrorDialog)
        assert "technician" in app.screen.error.message and "is empty" in app.screen.error.message


async def test_start_screen_keys_and_marks(tmp_path):
    app = make_app(logs_dir=tmp_path, technician="jdoe")
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, StartScreen), what="start screen")
        keys = {b.key: b.action for b in StartScreen.BINDINGS}
        assert keys.get("f2") == "board_history" and "ctrl+r" not in keys
        marks = [b.BUTTON_INNER for b in app.screen.query(MarkedRadioButton)]
        assert marks == ["●", "○", "○"]  # chosen and not chosen differ in shape, not colour
        titles = [c.title for c in app.get_system_commands(app.screen)]
        assert [t for t in titles if "key" in t.lower()] == ["Help: every key"]


def test_the_standing_warning_uses_the_hazard_signal_word():
    from fieldtool.tui.app import help_text

    assert f"{SIGNAL_WORD}: Stored charge can kill" in help_text()


async def test_enter_on_a_profile_goes_to_the_board_serial(tmp_path):
    # the serial is the next thing to type (common practice, no source)
    app = make_app(logs_dir=tmp_path, technician="jdoe")
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, StartScreen), what="start screen")
        app.screen.query_one("#profiles").focus()
        await pilot.press("down", "enter")
        await pilot.pause()
        assert app.focused is app.screen.query_one("#serial")
        await pilot.press(*"TG-0042")
        assert app.screen.query_one("#serial").value == "TG-0042"


async def test_digits_typed_in_a_burst_all_reach_the_entry(profile, cache_dir, tmp_path):
    # A terminal hands over keys typed quickly (or pasted by a keyboard wedge) all at once;
    # the first digit opens the entry and the rest must follow it there, none lost.
    from textual import events

    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await probing(pilot)
        for ch in "99.1":
            app.post_message(events.Key(ch, ch))  # posted together, not one idle apart
        await pilot.pause()
        await pilot.pause()
        assert screen.query_one("#entry").value == "99.1"
