"""End to end through the keys: probe a faulted board, name the part, repair, verify, close.

The board's readings come from the solver with the fault injected (``core.expect``: the same
circuit computation checked against ngspice in tests/core), typed in as a technician would.
"""

from __future__ import annotations

import pytest

from fieldtool.core import history as hist
from fieldtool.core.circuit.expect import expect
from fieldtool.core.diagnosis.faults import parse_fault
from fieldtool.core.measurement import TYPED
from fieldtool.core.session import unfinished_session
from fieldtool.tui.dialogs import ActionDialog, OutcomeDialog
from fieldtool.tui.node_table import NodeTable
from fieldtool.tui.start import StartScreen
from tests.tui.conftest import drain, probing, type_reading, typed_app, until


def as_typed(volts: float) -> str:
    """A reading as a technician types it off a 4½-digit meter."""
    return f"{volts:.4g}"


def found(diagnosis, key: str) -> bool:
    """The fault is the top suspect, or inside the ambiguity group the top suspect is in."""
    top = diagnosis.suspects[0].key
    if top == key:
        return True
    return any(top in g.members and key in g.members for g in diagnosis.ambiguity)


async def probe_until_found(pilot, screen, readings: dict[str, float], key: str) -> list[str]:
    """Follow the next-node hints, typing each reading, until the fault is on top."""
    probed: list[str] = []
    session = screen.session
    for _ in range(len(session.dictionary.nodes)):
        if found(session.diagnosis, key) and session.diagnosis.next_probe is None:
            break
        node = session.diagnosis.next_probe
        if node is None:
            node = next(n for n in session.dictionary.nodes if n not in session.taken)
            screen.query_one(NodeTable).select(node)
        else:
            await pilot.press("n")
        await pilot.pause()
        assert screen.selected == node
        await type_reading(pilot, as_typed(readings[node]))
        probed.append(node)
    return probed


@pytest.mark.parametrize("spec", ["D7:open", "C6:short"])
async def test_typed_readings_find_the_injected_fault(profile, cache_dir, tmp_path, spec):
    fault = parse_fault(spec, profile)
    truth = {n.node: n.volts for n in expect(profile, fault=fault).nodes}
    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(100, 30)) as pilot:
        screen = await probing(pilot)
        probed = await probe_until_found(pilot, screen, truth, fault.key)
        d = screen.session.diagnosis
        assert found(d, fault.key), [s.key for s in d.suspects[:5]]
        # Guided probing needs fewer readings than the board has nodes.
        assert len(probed) < len(screen.session.dictionary.nodes)
        # The table shows what was typed, and deviating nodes say so in words.
        table = screen.query_one(NodeTable)
        assert set(table.values) == set(probed)
        assert any(table.verdict_for(n).state in ("high", "low") for n in probed)
        drain(app)
    records = hist.read_board(tmp_path, "TG-0042").events
    kinds = [r.kind for r in records]
    assert kinds[0] == "session-opened"
    taken = [r.event.measurement for r in records if r.kind == "reading"]
    assert [m.at for m in taken] == probed
    assert all(m.source == TYPED and m.settled for m in taken)


async def test_repair_and_verification_are_recorded(profile, cache_dir, tmp_path):
    fault = parse_fault("C6:short", profile)
    faulted = {n.node: n.volts for n in expect(profile, fault=fault).nodes}
    healthy = {n.node: n.volts for n in expect(profile).nodes}
    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(100, 30)) as pilot:
        screen = await probing(pilot)
        await probe_until_found(pilot, screen, faulted, fault.key)
        top = screen.session.diagnosis.suspects[0]
        await pilot.press("r")
        await until(pilot, lambda: isinstance(app.screen, ActionDialog), what="repair dialog")
        dialog = app.screen
        # The form starts on the top suspect; the technician names the part found.
        assert dialog.query_one("#part").value == top.key.split(":")[0]
        dialog.query_one("#part").value = "C6"
        await pilot.pause()
        dialog.query_one("#mode").value = "short"
        await pilot.click("#part-used")
        await pilot.press(*"2.2uF 250V X7R")
        await pilot.press("ctrl+s")
        await until(pilot, lambda: app.screen is screen, what="back on probing")
        assert screen.session.phase == "verifying"
        assert screen.session.taken == {}
        # Verification readings on the repaired board: the diagnosis starts afresh from them.
        for node in ("S6", "S8"):
            screen.query_one(NodeTable).select(node)
            await pilot.pause()
            await type_reading(pilot, as_typed(healthy[node]))
        assert screen.session.diagnosis.suspects[0].key == "healthy"
        await pilot.press("c")
        await until(pilot, lambda: isinstance(app.screen, OutcomeDialog), what="outcome dialog")
        await pilot.press("f")
        await until(pilot, lambda: isinstance(app.screen, StartScreen), what="start screen")
        assert app.writer is not None
        drain(app)
    records = hist.read_board(tmp_path, "TG-0042").events
    kinds = [r.kind for r in records]
    action_at = kinds.index("action")
    assert kinds[action_at - 1] == "diagnosis"  # what led to the repair, saved with it
    action = records[action_at].event
    assert (action.designator, action.done, action.mode) == ("C6", "replaced", "short")
    assert action.part_used == "2.2uF 250V X7R"
    verifications = [r.event.measurement for r in records if r.kind == "verification"]
    assert [v.at for v in verifications] == ["S6", "S8"]
    assert verifications[1].value == pytest.approx(healthy["S8"], rel=1e-3)
    assert kinds[-1] == "session-closed" and records[-1].event.outcome == "fixed"
    assert unfinished_session(tmp_path, "TG-0042") is None


async def test_bad_typed_reading_shows_a_dialog_and_keeps_the_text(profile, cache_dir, tmp_path):
    from fieldtool.tui.dialogs import ErrorDialog

    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await probing(pilot)
        await type_reading(pilot, "12.9 furlongs")
        assert isinstance(app.screen, ErrorDialog)
        assert "unit" in app.screen.error.message
        await pilot.press("escape")
        assert app.screen is screen
        assert screen.query_one("#entry").value == "12.9 furlongs"
        assert screen.session.taken == {}
