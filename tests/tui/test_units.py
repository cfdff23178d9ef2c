"""The UI's pure pieces: verdicts, number formats, bars, the settle judgement, the ladder."""

from __future__ import annotations

import pytest

from fieldtool.meters.parse import Reading
from fieldtool.meters.settings import SettleRule
from fieldtool.tui.ladder import ladder_cells
from fieldtool.tui.meter_strip import settle_state
from fieldtool.tui.view import bar, deviation_text, percent_text, verdict, volts_text
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


@pytest.mark.parametrize(
    ("volts", "text"),
    [
        (125.81, "125.8"),
        (0.33012, "0.3301"),
        (-56.93, "-56.93"),
        (0.0, "0"),
        (None, "OL"),
        (2.904e-5, "0.0000"),  # no more decimals than a meter shows
        (1e300, "1.000e+300"),  # an absurd value stays short
        (-2.5e7, "-2.500e+07"),
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


RULE = SettleRule(count=3, percent=0.2, volts=0.005, timeout_s=5.0)


@pytest.mark.parametrize(
    ("values", "settled"),
    [
        ([12.5] * 6, True),
        ([12.5] * 3, False),  # the trend check needs the three before to agree too
        ([12.0, 12.2, 12.4, 12.5, 12.5, 12.5], False),  # still rising before the window
        ([10.0, 10.5, 11.0, 11.5, 12.0, 12.5], False),  # a creep is not settled
        ([12.5, 12.5, 12.5, 12.5, 12.5, 13.5], False),
    ],
)
def test_settle_judgement_follows_the_meter_rule(values, settled):
    s = settle_state([Reading(v) for v in values], RULE)
    assert s.settled is settled
    assert s.volts == values[-1]


def test_settle_overload_and_empty():
    assert settle_state([], RULE) is None
    s = settle_state([Reading(None, overload=True)] * 3, RULE)
    assert s.overload and s.settled and s.volts is None


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
