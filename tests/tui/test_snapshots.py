"""Snapshots of the start, probing, history and help screens at 80×24 and 120×40.

Deterministic: typed readings only (no meter, no clock in view), history records with fixed
times, the dictionary from a warm cache. Update with ``pytest --snapshot-update`` after a
deliberate change and look at the SVGs before committing them.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from fieldtool.core import history as hist
from fieldtool.core.circuit.expect import expect
from fieldtool.core.diagnosis.faults import parse_fault
from fieldtool.core.measurement import Source
from fieldtool.tui.app import make_app
from fieldtool.tui.history import HistoryScreen
from fieldtool.tui.node_table import NodeTable
from tests.readings import reading, verification
from tests.tui.conftest import probing, type_reading, typed_app, until

SIZES = [pytest.param((80, 24), id="80x24"), pytest.param((120, 40), id="120x40")]


def board_history(logs, profile) -> None:
    """A closed repair session on TG-0042 with fixed times."""
    t0 = datetime(2026, 11, 2, 8, 30, tzinfo=UTC)
    events = [
        hist.SessionOpened(
            technician="JM", profile_hash=profile.digest, tool_version="0.1.0", session_id="s-1"
        ),
        reading("S0", 15.02),
        reading("S4", 61.7, source=Source("meter", "BENCH,DMM-9,0042,1.0"), spread=0.004),
        reading("S8", None),
        hist.DiagnosisSnapshot(suspects=(hist.SnapshotSuspect("C6", "short", 0.82),)),
        hist.Action(designator="C6", done="replaced", mode="short", part_used="2.2uF 250V"),
        verification("S8", 125.6),
        hist.SessionClosed(outcome="fixed"),
    ]
    session = events[0].session_id
    for i, event in enumerate(events):
        moment = t0 + timedelta(minutes=3 * i)
        hist.append(logs, profile.name, "TG-0042", event, time=moment, session=session)


@pytest.mark.parametrize("size", SIZES)
def test_start_screen(snap_compare, tmp_path, size):
    app = make_app(logs_dir=tmp_path)
    assert snap_compare(app, terminal_size=size)


@pytest.mark.parametrize("size", SIZES)
def test_probing_screen(snap_compare, profile, cache_dir, tmp_path, size):
    truth = {n.node: n.volts for n in expect(profile, fault=parse_fault("C6:short", profile)).nodes}
    app = typed_app(profile, tmp_path / "logs", cache_dir)

    async def readings(pilot):
        screen = await probing(pilot)
        for node in ("S0", "S4", "S6"):
            screen.query_one(NodeTable).select(node)
            await pilot.pause()
            await type_reading(pilot, f"{truth[node]:.4g}")
        screen.query_one(NodeTable).select("S8")
        await until(pilot, lambda: screen.safety_current, what="safety figures")
        await pilot.app.workers.wait_for_complete()
        await pilot.pause()
        assert screen.session.volts_by_node().keys() == {"S0", "S4", "S6"}

    assert snap_compare(app, terminal_size=size, run_before=readings)


@pytest.mark.parametrize("size", SIZES)
def test_history_screen(snap_compare, profile, tmp_path, size):
    board_history(tmp_path, profile)
    app = make_app(logs_dir=tmp_path)

    async def open_history(pilot):
        pilot.app.action_history("TG-0042")
        await until(pilot, lambda: isinstance(pilot.app.screen, HistoryScreen), what="history")
        await pilot.app.workers.wait_for_complete()
        table = pilot.app.screen.query_one("#timeline")
        await until(pilot, lambda: table.row_count == 8, what="rows")
        await pilot.pause()

    assert snap_compare(app, terminal_size=size, run_before=open_history)


@pytest.mark.parametrize("size", SIZES)
def test_help_screen(snap_compare, tmp_path, size):
    app = make_app(logs_dir=tmp_path)
    assert snap_compare(app, terminal_size=size, press=["question_mark"])


async def test_fleet_screen_and_priors_follow_confirmed_repairs(profile, dictionary, tmp_path):
    """A repair confirmed in a session closed fixed counts on the fleet screen and feeds the
    priors (the history store's fleet view)."""
    from fieldtool.core.session import choose_priors, history_failures
    from fieldtool.tui.history import FleetScreen

    hyps = dictionary.hypotheses
    published = choose_priors(profile, hyps, history_failures(tmp_path))
    board_history(tmp_path, profile)
    fleet = choose_priors(profile, hyps, history_failures(tmp_path))
    assert fleet.from_fleet and not published.from_fleet
    assert fleet.of("C6:short") > published.of("C6:short")
    app = make_app(logs_dir=tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        pilot.app.action_fleet(profile.name)
        await until(pilot, lambda: isinstance(pilot.app.screen, FleetScreen), what="fleet")
        await pilot.app.workers.wait_for_complete()
        await pilot.pause()
        table = pilot.app.screen.query_one("#failures")
        assert table.row_count == 1
        assert [str(c) for c in table.get_row_at(0)] == ["C6", "short", "1"]
