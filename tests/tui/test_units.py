"""The UI's pure pieces: verdicts, number formats, bars, the ladder (the settle judgement is
the meter's own: tests/meters/test_settle.py)."""

from __future__ import annotations

import pytest

from fieldtool.core.plausible import Range
from fieldtool.tui.ladder import ladder_cells
from fieldtool.tui.view import (
    WRONG_RANGE,
    bar,
    deviation_text,
    percent_text,
    verdict,
    volts_text,
)
from tests.conftest import make_profile


@pytest.mark.parametrize(
    ("volts", "read", "state"),
    [
        (None, False, "unread"),
        (None, True, "over range"),
        (12.0, True, "in band"),
        (12.6, True, "high"),
        (11.2, True, "low"),
        (12.5, True, "in band"),  # the band's edge counts as inside
    ],
)
def test_verdict(volts, read, state):
    assert verdict(12.0, 11.5, 12.5, volts, read).state == state


def test_deviation_words():
    v = verdict(100.0, 97.0, 103.0, 61.7, True)
    assert deviation_text(v) == "−38 (−38%)"
    assert deviation_text(v, percent=False) == "−38"
    on_it = verdict(15.0, 14.6, 15.4, 15.0000139, True)
    assert deviation_text(on_it, percent=False) == "+0.00"  # never "+1.4e-05"
    assert deviation_text(verdict(15.0, 14.6, 15.4, 1e300, True), percent=False) == "+1.0e+300"
    plausible = Range(-50.0, 50.0, "V", "test")
    assert verdict(15.0, 14.6, 15.4, 1e300, True, plausible).state == WRONG_RANGE


@pytest.mark.parametrize(
    ("volts", "text"),
    [
        (125.81, "125.8"),
        (0.33012, "0.3301"),
        (-56.93, "-56.93"),
        (0.0, "0"),
        (None, "OL"),
        (2.904e-5, "0.0000"),  # no more decimals than a meter shows
        (1e300, "1e300"),  # an absurd value stays short
        (-2.5e7, "-2.5e7"),
    ],
)
def test_volts_text(volts, text):
    assert volts_text(volts) == text


@pytest.mark.parametrize(
    ("p", "text"), [(0.0, "0%"), (0.004, "<1%"), (0.5, "50%"), (0.996, ">99%"), (1.0, "100%")]
)
def test_percent_never_rounds_a_possibility_away(p, text):
    assert percent_text(p) == text


def test_bar_fills_in_eighths():
    assert bar(1.0, 4) == "████"
    assert bar(0.0, 4) == "····"
    assert bar(0.5, 3) == "█▌··"[:3]


@pytest.mark.parametrize(
    ("topology", "first", "last", "diodes"),
    [("dc-ladder", "S0", "S3", 6), ("ac-ladder", "GND", "S3", 6), ("dickson", "S0", "OUT", 4)],
)
def test_ladder_cells_follow_the_diode_chain(topology, first, last, diodes):
    sections = {"board": {"topology": topology}}
    if topology == "ac-ladder":
        sections["supply"] = None
    p = make_profile(**sections)
    cells = ladder_cells(p)
    assert (cells[0].node, cells[-1].node) == (first, last)
    assert [c.diode for c in cells if c.diode] == [f"D{i}" for i in range(1, diodes + 1)]
    # Every capacitor hangs from exactly one node.
    caps = [c.up for c in cells if c.up] + [c.down for c in cells if c.down]
    assert sorted(caps, key=lambda r: int(r[1:])) == [f"C{i}" for i in range(1, len(caps) + 1)]
    assert cells[-1].diode is None


def test_the_demo_reveal_says_no_repair_when_none_was_made(profile, dictionary):
    """'Readings after the last repair' only after a repair; otherwise it says none was made."""
    from fieldtool.core import history as h
    from fieldtool.core.diagnosis.faults import parse_fault
    from fieldtool.core.session import BoardSession
    from fieldtool.tui.view import reveal_text
    from tests.readings import dc

    session = BoardSession(profile, "DEMO-1", dictionary, lambda e, sid: None)
    session.open()
    session.take(dc("S0", 15.0))
    fault = parse_fault("D3:open", profile)
    text = reveal_text(session, fault)
    assert "No repair was recorded. Readings: S0 15.00 V." in text
    assert "after the last repair" not in text and "Not found: you worked on no part" in text
    session.record_repair(h.Action("D3", "replaced", "open"))
    text = reveal_text(session, fault)
    assert "Found: you worked on D3." in text and "Readings after the last repair: none." in text
