"""When a meter's reading has stopped moving: one pure rule, used live and blocking.

``judge`` looks at the samples taken since the probe landed and says where the value stands:
the latest value, how far the last ``rule.count`` samples spread, and whether the rule is met
(``count`` in a row within percent·|v|/100 + volts (+ amps for a current) and, with
``rule.trend``, the ``count``
before them agreeing too at a mean no more than half a band away, so a slow creep is not
called settled; ``count`` overloads in a row are a settled overload). The terminal UI calls it
on every new sample; ``settle`` reads until it is met or the rule's timeout passes (``fieldtool
read --settle``).
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import replace

from fieldtool.core.measurement import Measurement
from fieldtool.meters.settings import SettleRule


def _band(values: Sequence[float], rule: SettleRule, unit: str) -> float:
    centre = sum(values) / len(values)
    return rule.percent / 100.0 * abs(centre) + rule.fixed(unit)


def _agree(values: Sequence[float], rule: SettleRule, unit: str) -> bool:
    """True when every value lies within the rule's band around their mean."""
    return max(values) - min(values) <= _band(values, rule, unit)


def _steady(before: Sequence[float], window: Sequence[float], rule: SettleRule, unit: str) -> bool:
    """True when the window before agrees too and the mean has not moved by half a band."""
    if len(before) < rule.count or not _agree(before, rule, unit):
        return False
    shift = abs(sum(window) / len(window) - sum(before) / len(before))
    return shift <= 0.5 * _band(window, rule, unit)


def judge(samples: Sequence[Measurement], rule: SettleRule) -> Measurement | None:
    """The latest sample with the spread of the last ``rule.count``, whether the rule is met,
    and how many samples were judged; None before any sample."""
    return _verdict(samples, rule) if samples else None


def _same_kind(samples: Sequence[Measurement]) -> Sequence[Measurement]:
    """The trailing run of samples of the last one's kind (the dial may have turned)."""
    last = samples[-1]
    start = len(samples) - 1
    while start > 0 and (samples[start - 1].quantity, samples[start - 1].conditions) == (
        last.quantity,
        last.conditions,
    ):
        start -= 1
    return samples[start:]


def _verdict(samples: Sequence[Measurement], rule: SettleRule) -> Measurement:
    samples = _same_kind(samples)
    last = samples[-1]
    recent = samples[-rule.count :]
    full = len(recent) == rule.count
    if full and all(s.overload for s in recent):
        return replace(last, spread=None, settled=True, samples=len(samples))
    numbers = [s.value for s in recent if s.value is not None]
    earlier = [s.value for s in samples[-2 * rule.count : -rule.count] if s.value is not None]
    spread = max(numbers) - min(numbers) if len(numbers) > 1 else None
    ok = full and len(numbers) == rule.count and _agree(numbers, rule, last.unit)
    if ok and rule.trend:
        ok = _steady(earlier, numbers, rule, last.unit)
    return replace(last, spread=spread, settled=ok, samples=len(samples))


def settle(
    read: Callable[[], Measurement],
    rule: SettleRule,
    clock: Callable[[], float] = time.monotonic,
    on_sample: Callable[[Measurement], None] | None = None,
) -> Measurement:
    """Read until ``judge`` says settled, or return its honest verdict at the timeout."""
    start = clock()
    samples: list[Measurement] = []
    while True:
        sample = read()
        samples.append(sample)
        if on_sample is not None:
            on_sample(sample)
        verdict = _verdict(samples, rule)
        if verdict.settled or clock() - start >= rule.timeout_s:
            return verdict
