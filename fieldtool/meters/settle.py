"""Wait for a meter reading to stop moving before it is trusted."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

from fieldtool.meters.parse import Reading
from fieldtool.meters.settings import SettleRule


@dataclass(frozen=True)
class Settled:
    """The outcome of settling: the value, how far the last readings spread, and honesty."""

    volts: float | None
    spread: float | None
    count: int
    overload: bool
    settled: bool


def _band(values: list[float], rule: SettleRule) -> float:
    centre = sum(values) / len(values)
    return rule.percent / 100.0 * abs(centre) + rule.volts


def _agree(values: list[float], rule: SettleRule) -> bool:
    """True when every value lies within the rule's band around their mean."""
    return max(values) - min(values) <= _band(values, rule)


def _steady(before: list[float], window: list[float], rule: SettleRule) -> bool:
    """True when the window before agrees too and the mean has not moved by half a band."""
    if len(before) < rule.count or not _agree(before, rule):
        return False
    shift = abs(sum(window) / len(window) - sum(before) / len(before))
    return shift <= 0.5 * _band(window, rule)


def settle(
    read_fn: Callable[[], Reading],
    rule: SettleRule,
    clock: Callable[[], float] = time.monotonic,
    on_value: Callable[[Reading], None] | None = None,
) -> Settled:
    """Read until ``rule.count`` readings in a row agree (and, with ``rule.trend``, the
    ``count`` before them too, at the same mean), or report honestly at the timeout."""
    start = clock()
    history: list[Reading] = []
    total = 0
    while True:
        reading = read_fn()
        total += 1
        if on_value is not None:
            on_value(reading)
        history = (history + [reading])[-2 * rule.count :]
        recent = history[-rule.count :]
        window_full = len(recent) == rule.count
        if window_full and all(r.overload for r in recent):
            return Settled(None, None, total, overload=True, settled=True)
        numbers = [r.volts for r in recent if r.volts is not None]
        earlier = [r.volts for r in history[: -rule.count] if r.volts is not None]
        agreed = window_full and len(numbers) == rule.count and _agree(numbers, rule)
        if agreed and (not rule.trend or _steady(earlier, numbers, rule)):
            return Settled(numbers[-1], max(numbers) - min(numbers), total, False, True)
        if clock() - start >= rule.timeout_s:
            spread = max(numbers) - min(numbers) if len(numbers) > 1 else None
            return Settled(reading.volts, spread, total, overload=reading.overload, settled=False)
