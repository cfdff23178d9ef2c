"""Measuring beyond DC volts in the terminal UI, as a technician does it with keys: choosing the
kind (k), the power-off checklist before diode tests (p), the test load's caution, readings of
each kind typed or taken from the simulated meter, every one saved in the history with its kind.
"""

from __future__ import annotations

import pytest
from textual.widgets import Button, Checkbox, OptionList

from fieldtool.core import history as hist
from fieldtool.core.circuit.safety import POWER_OFF_CAUTION, TEST_LOAD_CAUTION
from fieldtool.tui.kinds import KindDialog, LoadCautionDialog, PowerOffDialog
from fieldtool.tui.meter_strip import MeterChoice, MeterStrip
from tests.tui.conftest import drain, probing, type_reading, typed_app, until


async def choose(pilot, words: str) -> None:
    """Open the kind dialog (k) and pick the line that ends with ``words``."""
    await pilot.press("k")
    await until(pilot, lambda: isinstance(pilot.app.screen, KindDialog), what="kind dialog")
    dialog = pilot.app.screen
    index = next(i for i, c in enumerate(dialog.choices) if c.words.endswith(words))
    options = dialog.query_one(OptionList)
    options.highlighted = index
    await pilot.press("enter")
    await pilot.pause()


async def tick_all_and(pilot, button: str) -> None:
    """Tick every box of the dialog on top (clicking each) and press ``button``."""
    screen = pilot.app.screen
    assert screen.query_one(f"#{button}", Button).disabled  # not before the boxes are ticked
    for box in screen.query(Checkbox):
        await pilot.click(box)
    await pilot.pause()
    await pilot.click(f"#{button}")
    await pilot.pause()


def saved_readings(logs, serial):
    records = hist.read_board(logs, serial).events
    return [r.event.measurement for r in records if r.kind == "reading"]


async def test_typed_kinds_power_off_and_test_load(profile, cache_dir, tmp_path):
    logs = tmp_path / "logs"
    app = typed_app(profile, logs, cache_dir, serial="TG-0101")
    async with app.run_test(size=(100, 34)) as pilot:
        screen = await probing(pilot)
        await choose(pilot, "ripple peak to peak at S0 (scope)")
        assert screen.measuring.quantity.name == "ripple-pp"
        await type_reading(pilot, "31mV")
        # the supply lead: readings go there, not to the selected node
        await choose(pilot, "supply current (meter in series with the supply lead)")
        await type_reading(pilot, "0.29mA")
        # a test load: its power and caution first, confirmed before anything is read
        await pilot.press("down")
        await choose(pilot, "DC volts at P1 with the 47kΩ test load on")
        assert isinstance(pilot.app.screen, LoadCautionDialog)
        words = pilot.app.screen.words
        assert (
            "47kΩ test load from S8 to ground takes about" in words and TEST_LOAD_CAUTION in words
        )
        await tick_all_and(pilot, "on")
        assert screen.load_on == 47e3 and "47kΩ load on" in str(screen.title_text())
        await type_reading(pilot, "21.6")
        # a diode test needs the power-off checklist; cancelling it leaves the board powered
        await choose(pilot, "diode test across D5")
        assert isinstance(pilot.app.screen, PowerOffDialog)
        await pilot.click("#cancel")
        await pilot.pause()
        assert screen.session.powered and screen.measuring.quantity.name == "dc-loaded"
        await choose(pilot, "diode test across D5")
        body = str(pilot.app.screen.query_one(".dialog-body").render())
        assert POWER_OFF_CAUTION.format(safe=profile.safe_volts)[:60] in body.replace("\n", " ")
        await tick_all_and(pilot, "off")
        assert not screen.session.powered and "board OFF" in str(screen.title_text())
        assert screen.load_on is None  # taken off with the board off
        await type_reading(pilot, "0.58")
        # a powered kind with the board off is refused until it is powered again (p)
        await choose(pilot, "AC volts at P1 (true-RMS meter on AC)")
        assert screen.measuring.quantity.name == "diode-test"
        await pilot.press("p")
        await pilot.pause()
        assert screen.session.powered and screen.measuring.quantity.name == "dc"
        drain(app)
    taken = saved_readings(logs, "TG-0101")
    assert [(m.quantity.name, m.at, m.value) for m in taken] == [
        ("ripple-pp", "S0", pytest.approx(0.031)),
        ("current", "supply", pytest.approx(0.29e-3)),
        ("dc-loaded", "P1", pytest.approx(21.6)),
        ("diode-test", "D5", pytest.approx(0.58)),
    ]
    assert taken[2].condition("test_load_ohms") == 47e3


async def test_the_simulated_meter_follows_the_kind_and_the_board(profile, cache_dir, tmp_path):
    logs = tmp_path / "logs"
    meter = MeterChoice(kind="simulated", seed=4)
    app = typed_app(profile, logs, cache_dir, serial="TG-0102", meter=meter)
    async with app.run_test(size=(100, 34)) as pilot:
        screen = await probing(pilot)
        strip = screen.query_one(MeterStrip)
        await choose(pilot, "supply current (meter in series with the supply lead)")

        def settled_of(kind):
            s = strip.settle
            return s is not None and s.settled and s.quantity.name == kind

        await until(pilot, lambda: settled_of("current"), what="a settled supply current")
        assert 1e-4 < strip.settle.value < 1e-3  # the board draws a few hundred µA
        await pilot.press("a")
        await pilot.pause()
        await choose(pilot, "diode test across D3")
        await tick_all_and(pilot, "off")
        await until(pilot, lambda: settled_of("diode-test"), 30, "a settled diode test")
        assert 0.4 < strip.settle.value < 0.8  # a silicon junction's forward drop
        await pilot.press("a")
        await pilot.pause()
        drain(app)
    taken = saved_readings(logs, "TG-0102")
    assert [(m.quantity.name, m.at, m.source.kind) for m in taken] == [
        ("current", "supply", "simulated"),
        ("diode-test", "D3", "simulated"),
    ]
