"""The settle rule: one pure judgement (``judge``), used live by the UI and blocking by
``settle`` (``fieldtool read --settle``). The rule itself (count in a row within percent of
the reading plus volts, and the trend check) is common practice, no source."""

from __future__ import annotations

from dataclasses import replace

import pytest

from fieldtool.core.measurement import DC, Measurement, Source
from fieldtool.meters.settings import SettleRule
from fieldtool.meters.settle import judge, settle

METER = Source("meter", "ACME,DMM,1,1")
RULE = SettleRule(count=3, percent=0.2, volts=0.005, timeout_s=5.0)
FLAT = SettleRule(count=3, percent=0.2, volts=0.005, timeout_s=5.0, trend=False)


def samples(*values: float | None) -> list[Measurement]:
    """Raw meter samples (None: over range), not placed, not settled."""
    return [Measurement(None, DC, v, METER) for v in values]


@pytest.mark.parametrize(
    ("rule", "values", "settled", "spread"),
    [
        (RULE, [12.5] * 6, True, 0.0),
        (RULE, [12.5] * 3, False, 0.0),  # the trend check needs the three before to agree too
        (RULE, [12.0, 12.2, 12.4, 12.5, 12.5, 12.5], False, 0.0),  # still rising before
        (RULE, [10.0, 10.5, 11.0, 11.5, 12.0, 12.5], False, 1.0),  # a creep is not settled
        (RULE, [12.5, 12.5, 12.5, 12.5, 12.5, 13.5], False, 1.0),
        (RULE, [12.5, 12.51, 12.5, 12.49, 12.5, 12.51], True, 0.02),  # noise inside the band
        (FLAT, [12.5] * 3, True, 0.0),  # without the trend check three in a row are enough
        (FLAT, [12.5, 12.5], False, 0.0),  # not yet three
        (FLAT, [10.0, 12.0, 12.5, 12.51, 12.505], True, 0.01),
        (FLAT, [12.5, 12.6, 12.5], False, 0.1),  # 0.1 V apart: band 0.2 % of 12.5 + 5 mV
        # percent is a percentage: 0.2 means 0.2 % of the reading, at 100 V a 0.2 V band
        (
            SettleRule(count=3, percent=0.2, volts=0.0, trend=False),
            [100.0, 100.1, 100.19],
            True,
            0.19,
        ),
        (
            SettleRule(count=3, percent=0.2, volts=0.0, trend=False),
            [100.0, 100.1, 100.3],
            False,
            0.3,
        ),
        (RULE, [12.5, 12.5, None, 12.5, 12.5, 12.5], False, 0.0),  # the window before has a gap
        (RULE, [None, 12.5, 12.5, 12.5, 12.5, 12.5, 12.5], True, 0.0),  # an old one is forgotten
        (RULE, [12.5, 12.5, 12.5, 12.5, None, 12.5], False, 0.0),  # a recent one is not
    ],
)
def test_judgement_table(rule, values, settled, spread):
    verdict = judge(samples(*values), rule)
    assert verdict.settled is settled
    assert verdict.value == values[-1]
    assert verdict.spread == pytest.approx(spread, abs=1e-9)
    assert verdict.samples == len(values)
    assert (verdict.source, verdict.quantity, verdict.at) == (METER, DC, None)


@pytest.mark.parametrize(
    ("values", "settled", "value"),
    [
        ([None] * 3, True, None),  # over range, steadily: a settled overload
        ([12.5, None, None], False, None),
        ([None, None, 12.5], False, 12.5),
    ],
)
def test_overloads(values, settled, value):
    verdict = judge(samples(*values), RULE)
    assert (verdict.settled, verdict.value, verdict.overload) == (settled, value, value is None)


def test_nothing_to_judge_yet():
    assert judge([], RULE) is None


def test_the_place_travels_with_the_samples():
    placed = [s.placed("S3") for s in samples(12.5, 12.5, 12.5)]
    assert judge(placed, FLAT).at == "S3"


def test_settle_with_a_fake_clock_reports_every_sample():
    values = iter([10.0, 12.0, 12.50, 12.51, 12.505, 99.0])
    shown = []
    result = settle(
        lambda: samples(next(values))[0], FLAT, clock=lambda: 0.0, on_sample=shown.append
    )
    assert (result.value, result.samples, result.settled) == (12.505, 5, True)
    assert result.spread == pytest.approx(0.01)
    assert [s.value for s in shown] == [10.0, 12.0, 12.50, 12.51, 12.505]


def test_settle_timeout_is_honest():
    values = iter([1.0, 2.0, 3.0, 4.0])
    ticks = iter([0.0, 1.0, 2.0, 11.0, 12.0])
    result = settle(lambda: samples(next(values))[0], SettleRule(), clock=lambda: next(ticks))
    assert (result.value, result.settled, result.samples) == (3.0, False, 3)
    assert result.spread == pytest.approx(2.0)


def test_settle_trend_refuses_a_slow_creep():
    # Each three readings of a creep of 0.1 V a reading agree within 0.2 % of 100 V, but the
    # mean keeps moving: with the trend check that is not settled; a flat run is.
    creep = iter([99.5 + 0.1 * i for i in range(40)])
    ticks = iter([0.25 * i for i in range(80)])
    rule = SettleRule(count=3, percent=0.2, volts=0.0, timeout_s=5.0)
    result = settle(lambda: samples(next(creep))[0], rule, clock=lambda: next(ticks))
    assert result.settled is False
    flat = iter([99.0, 100.0, 100.02, 100.01, 100.0, 100.02, 100.01, 100.0])
    result = settle(lambda: samples(next(flat))[0], rule, clock=lambda: 0.0)
    assert (result.settled, result.samples, result.value) == (True, 7, 100.01)


@pytest.mark.parametrize(
    "values",
    [
        [12.0, 12.4, 12.5, 12.5, 12.5, 12.5, 12.5],
        [99.5 + 0.1 * i for i in range(12)],
        [5.0, None, 5.0, 5.0, 5.0, 5.0, 5.0, 5.0],
    ],
)
def test_blocking_and_live_give_the_same_verdict(values):
    """``settle`` stops where ``judge`` over the same samples first says settled (or, at the
    timeout, gives what ``judge`` says of them all)."""
    feed = iter(samples(*values))
    read = []

    def sample() -> Measurement:
        read.append(next(feed))
        return read[-1]

    rule = replace(RULE, timeout_s=float(len(values)))  # one second a sample on this clock
    result = settle(sample, rule, clock=lambda: float(len(read)))
    live = [judge(samples(*values[:n]), rule) for n in range(1, len(values) + 1)]
    first = next(v for v in live if v.settled or v.samples == len(values))
    assert result == first
