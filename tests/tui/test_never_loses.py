"""Never blocks, never loses: meter unplugged mid-session, resume, quitting mid-session."""

from __future__ import annotations

import os
import threading
from datetime import UTC, datetime, timedelta

import pytest

from fieldtool.core import history as hist
from fieldtool.core.session import unfinished_session
from fieldtool.meters.settings import MeterSettings, SettleRule
from fieldtool.tui.dialogs import ResumeDialog
from fieldtool.tui.meter_strip import MeterChoice, MeterStrip
from fieldtool.tui.node_table import NodeTable
from tests.pty_lines import pty_lines
from tests.readings import reading
from tests.tui.conftest import drain, probing, type_reading, typed_app, until

IDENTITY = "BENCH,DMM-9,0042,1.0"
NO_ERROR = '0,"No error"'  # SCPI's empty error queue


def answer_scpi(fd: int, volts: str, log: list[str], unplug: threading.Event) -> None:
    """Play a SCPI meter on the master side of a pty; on ``unplug``, hang up mid-dialogue.

    The thread closes the master itself: closing it from another thread while this one is
    blocked reading it would leave the file open and let the number be reused.
    """
    for command in pty_lines(fd):
        log.append(command)
        if unplug.is_set():
            os.close(fd)  # the cable is pulled with a request unanswered
            return
        reply = {"*IDN?": IDENTITY, "SYST:ERR?": NO_ERROR, "READ?": volts}.get(command)
        if reply is not None:
            try:
                os.write(fd, (reply + "\n").encode())
            except OSError:
                return


@pytest.fixture
def pty_meter():
    """A real pseudo-terminal pair; the test plays the meter on the master side."""
    master, slave = os.openpty()
    log: list[str] = []
    unplug = threading.Event()
    thread = threading.Thread(
        target=answer_scpi, args=(master, "+1.25000E+01", log, unplug), daemon=True
    )
    thread.start()
    yield os.ttyname(slave), unplug, log
    unplug.set()
    thread.join(5)
    os.close(slave)


def pty_app(profile, logs, cache_dir, port: str, settle_count: int):
    """The app on TG-0042 reading the meter on ``port``, settled after ``settle_count``."""
    settings = MeterSettings(timeout_s=0.5, settle=SettleRule(count=settle_count, timeout_s=5.0))
    return typed_app(profile, logs, cache_dir, meter=MeterChoice("port", port, settings))


async def test_meter_unplugged_mid_session_keeps_every_reading(
    profile, cache_dir, tmp_path, pty_meter
):
    port, unplug, log = pty_meter
    app = pty_app(profile, tmp_path, cache_dir, port, settle_count=3)
    async with app.run_test(size=(100, 30)) as pilot:
        screen = await probing(pilot)
        strip = screen.query_one(MeterStrip)
        await until(pilot, lambda: strip.live, what="meter connected")
        assert strip.identity == IDENTITY
        await until(
            pilot, lambda: strip.settle is not None and strip.settle.settled, what="settled"
        )
        assert screen.check_action("accept", ()) is True
        assert screen.check_action("reconnect", ()) is False
        await pilot.press("a")
        taken = screen.session.latest("S0")
        assert (taken.value, str(taken.source), taken.settled) == (12.5, IDENTITY, True)
        assert taken.spread == 0.0 and taken.samples >= 3
        # Unplug: the far end of the serial line goes away mid-session.
        unplug.set()
        await until(
            pilot,
            lambda: not strip.live and "Meter disconnected" in screen.last_problem,
            what="meter lost and the notice shown",
        )
        assert screen.session.latest("S0").value == 12.5  # still there
        assert screen.check_action("accept", ()) is False
        assert screen.check_action("reconnect", ()) is True
        assert "m reconnects" in strip.status
        # Typing still works while the meter is gone.
        screen.query_one(NodeTable).select("S8")
        await pilot.pause()
        await type_reading(pilot, "126.1")
        assert screen.session.latest("S8").value == pytest.approx(126.1)
        drain(app)
    assert log[:4] == ["*IDN?", "*CLS", "CONF:VOLT:DC", "SYST:ERR?"] and "READ?" in log
    records = hist.read_board(tmp_path, "TG-0042").events
    readings = [r.event.measurement for r in records if r.kind == "reading"]
    assert [(m.at, m.value, str(m.source)) for m in readings] == [
        ("S0", 12.5, IDENTITY),
        ("S8", pytest.approx(126.1), "typed"),
    ]


async def test_a_value_taken_before_it_settles_says_so(profile, cache_dir, tmp_path, pty_meter):
    port, _, _ = pty_meter
    app = pty_app(profile, tmp_path, cache_dir, port, settle_count=10)
    async with app.run_test(size=(100, 30)) as pilot:
        screen = await probing(pilot)
        strip = screen.query_one(MeterStrip)
        await until(pilot, lambda: strip.settle is not None, what="a first sample")
        await pilot.press("a")  # not settled yet: nothing is taken
        assert screen.session.latest("S0") is None
        await pilot.press("A")
        taken = screen.session.latest("S0")
        assert (taken.value, taken.settled, str(taken.source)) == (12.5, False, IDENTITY)
        drain(app)
    (record,) = [r for r in hist.read_board(tmp_path, "TG-0042").events if r.kind == "reading"]
    assert record.fields["settled"] is False and record.fields["samples"] < 20


def interrupted_history(logs, profile) -> None:
    """A session on TG-0042 that was opened, had two readings, and never closed."""
    t0 = datetime(2026, 11, 30, 9, 0, tzinfo=UTC)
    events = [
        hist.SessionOpened(technician="AB", profile_hash=profile.digest, tool_version="0.1.0"),
        reading("S0", 15.0),
        reading("S8", 96.3),
    ]
    session = events[0].session_id
    for i, event in enumerate(events):
        moment = t0 + timedelta(minutes=i)
        hist.append(logs, profile.name, "TG-0042", event, time=moment, session=session)


async def test_resume_an_interrupted_session(profile, cache_dir, tmp_path):
    interrupted_history(tmp_path, profile)
    app = typed_app(profile, tmp_path, cache_dir, resume=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, ResumeDialog), what="resume question")
        assert "2 readings" in app.screen.text
        await pilot.press("r")
        screen = await probing(pilot)
        assert screen.session.volts_by_node() == {"S0": 15.0, "S8": 96.3}
        assert screen.query_one(NodeTable).values == {"S0": 15.0, "S8": 96.3}
        assert screen.session.resumed_from.startswith("2026-11-30T09:00")
        # Quitting mid-session asks nothing and loses nothing.
        screen.query_one(NodeTable).select("S4")
        await pilot.pause()
        await type_reading(pilot, "70.2")
        await pilot.press("q")
        await until(pilot, lambda: app.return_code is not None, what="exit")
    h = hist.read_board(tmp_path, "TG-0042")
    assert [r.kind for r in h.events].count("session-opened") == 1  # resumed, not reopened
    assert [r.event.measurement.at for r in h.events if r.kind == "reading"] == ["S0", "S8", "S4"]
    assert unfinished_session(tmp_path, "TG-0042") is not None


async def test_decline_resume_starts_a_new_session(profile, cache_dir, tmp_path):
    interrupted_history(tmp_path, profile)
    app = typed_app(profile, tmp_path, cache_dir, resume=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, ResumeDialog), what="resume question")
        await pilot.press("n")
        screen = await probing(pilot)
        assert screen.session.taken == {}
        drain(app)
    kinds = [r.kind for r in hist.read_board(tmp_path, "TG-0042").events]
    assert kinds.count("session-opened") == 2


async def test_unwritable_history_keeps_readings_and_says_so(profile, cache_dir, tmp_path):
    from fieldtool.tui.dialogs import ErrorDialog

    logs = tmp_path / "logs"
    logs.write_text("a file where the logs folder should be")
    app = typed_app(profile, logs, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, ErrorDialog), what="save error")
        assert app.screen.error.title == "History not saved"
        assert "kept in memory" in app.screen.error.message
        await pilot.press("escape")
        screen = await probing(pilot)
        await type_reading(pilot, "15.0")
        assert screen.session.latest("S0").value == 15.0
        app.writer.drain()
        assert len(app.writer.unsaved) == 2  # session-opened, then the reading, in order
        assert "unsaved" in screen.title_text().plain
        writer = app.writer
        await pilot.press("q")
    assert writer.unsaved == []
    assert app.writer_left_unsaved == 2 and app.rescued_to == tmp_path / "rescue"
    rescued = hist.read_board(tmp_path / "rescue", "TG-0042").events
    assert [r.kind for r in rescued] == ["session-opened", "reading"]
