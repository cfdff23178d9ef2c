"""``fieldtool record`` and the terminal UI run one session workflow: for the same readings,
repair, verification and outcome they write the same records (the readings' source aside:
a file for one, typed for the other)."""

from __future__ import annotations

import pytest

from fieldtool.cli import main
from fieldtool.core import history as h
from fieldtool.core.circuit.expect import expect
from fieldtool.core.diagnosis.faults import parse_fault
from fieldtool.core.measurement import TYPED, Source
from fieldtool.tui.app import make_app
from fieldtool.tui.config import SessionRequest
from fieldtool.tui.dialogs import ActionDialog, OutcomeDialog
from fieldtool.tui.meter_strip import MeterChoice
from fieldtool.tui.node_table import NodeTable
from fieldtool.tui.start import StartScreen
from tests.tui.conftest import BOARD, drain, probing, type_reading, until

BEFORE = ("S0", "S4", "S6", "S8")
AFTER = ("S6", "S8")
PART = "2.2uF 250V X7R"


def as_typed(volts: float) -> str:
    return f"{volts:.4g}"


@pytest.fixture(scope="module")
def values(profile):
    faulted = {
        n.node: n.volts for n in expect(profile, fault=parse_fault("C6:short", profile)).nodes
    }
    healthy = {n.node: n.volts for n in expect(profile).nodes}
    return {n: as_typed(faulted[n]) for n in BEFORE}, {n: as_typed(healthy[n]) for n in AFTER}


async def through_the_ui(profile, cache_dir, logs, before, after) -> None:
    request = SessionRequest(profile, "TG-0100", MeterChoice(), resume=False)
    app = make_app(logs_dir=logs, request=request, cache_dir=cache_dir, technician="JM")
    async with app.run_test(size=(100, 30)) as pilot:
        screen = await probing(pilot)

        async def read(node: str, text: str) -> None:
            screen.query_one(NodeTable).select(node)
            await pilot.pause()
            await type_reading(pilot, text)

        for node, text in before.items():
            await read(node, text)
        await pilot.press("r")
        await until(pilot, lambda: isinstance(app.screen, ActionDialog), what="repair dialog")
        app.screen.query_one("#part").value = "C6"
        await pilot.pause()
        app.screen.query_one("#mode").value = "short"
        await pilot.click("#part-used")
        await pilot.press(*PART)
        await pilot.press("ctrl+s")
        await until(pilot, lambda: app.screen is screen, what="back on probing")
        for node, text in after.items():
            await read(node, text)
        await pilot.press("c")
        await until(pilot, lambda: isinstance(app.screen, OutcomeDialog), what="outcome dialog")
        await pilot.press("f")
        await until(pilot, lambda: isinstance(app.screen, StartScreen), what="start screen")
        drain(app)


def through_record(capsys, monkeypatch, cache_dir, logs, tmp_path, before, after) -> None:
    monkeypatch.setenv("FIELDTOOL_CACHE", str(cache_dir))
    first, second = tmp_path / "before.csv", tmp_path / "after.csv"
    first.write_text("node,volts\n" + "".join(f"{n},{v}\n" for n, v in before.items()))
    second.write_text("node,volts\n" + "".join(f"{n},{v}\n" for n, v in after.items()))
    argv = ["record", str(BOARD), "--logs", str(logs), "--board", "TG-0100"]
    argv += ["--readings", str(first), "--verify", str(second), "--technician", "JM"]
    argv += ["--action", "C6:short replaced", "--part", PART, "--outcome", "fixed"]
    assert main(argv) == 0
    capsys.readouterr()


def comparable(record: h.Record):
    """A record without what must differ: ids, times, the session id, a reading's source."""
    event = record.event
    if isinstance(event, h.Reading):
        m = event.measurement
        return (record.kind, m.at, m.quantity, m.value, m.spread, m.settled, m.samples)
    if isinstance(event, h.SessionOpened):
        return (record.kind, event.technician, event.profile_hash, event.tool_version)
    return (record.kind, event)


async def test_record_and_the_ui_write_the_same_session(
    profile, cache_dir, tmp_path, values, capsys, monkeypatch
):
    before, after = values
    await through_the_ui(profile, cache_dir, tmp_path / "ui", before, after)
    through_record(capsys, monkeypatch, cache_dir, tmp_path / "cli", tmp_path, before, after)
    ui = h.read_board(tmp_path / "ui", "TG-0100").events
    cli = h.read_board(tmp_path / "cli", "TG-0100").events
    assert [comparable(r) for r in ui] == [comparable(r) for r in cli]
    assert [r.kind for r in ui] == (
        ["session-opened"]
        + ["reading"] * 4
        + ["diagnosis", "action"]
        + ["verification"] * 2
        + ["diagnosis", "session-closed"]
    )
    snapshot = ui[5].event
    # Shorts are a range of resistances: these four readings leave C6 and C9 shorted as one
    # honest ambiguity group (S1 would split them), so C6 is one of the top two.
    top_two = {(s.designator, s.mode) for s in snapshot.suspects[:2]}
    assert ("C6", "short") in top_two
    assert ui[6].event == h.Action("C6", "replaced", "short", PART, "")
    measured = [r.event.measurement for r in ui + cli if isinstance(r.event, h.Reading)]
    assert {m.source for m in measured[:6]} == {TYPED}
    assert {m.source for m in measured[6:]} == {
        Source("file", "before.csv"),
        Source("file", "after.csv"),
    }
    assert len({r.session for r in ui}) == 1 and len({r.session for r in cli}) == 1
