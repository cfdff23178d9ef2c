"""Plausible ranges: what a number may be before the tool believes it.

Every number that enters the tool (a profile value, a fault severity, a meter setting, a
command-line option, a reading) is checked against a ``Range`` at the place it enters: finite,
within bounds chosen for the quantity, each bound with the reason it was chosen. A value outside
is refused with one line naming the range and the reason, so nothing absurd reaches the solver,
a screen or a history file.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

_PREFIXES = (
    (1e15, "P"),
    (1e12, "T"),
    (1e9, "G"),
    (1e6, "M"),
    (1e3, "k"),
    (1.0, ""),
    (1e-3, "m"),
    (1e-6, "µ"),
    (1e-9, "n"),
    (1e-12, "p"),
    (1e-15, "f"),
)


def quantity(value: float, unit: str) -> str:
    """A value with an SI prefix and its unit, for messages: ``10 pF``, ``1.5 kV``, ``0 s``."""
    if not unit or unit in ("%", "×"):
        return f"{value:g}{unit}"
    if unit in ("s", "°C") and abs(value) >= 1:  # an hour is 3600 s, never 3.6 ks
        return f"{value:g} {unit}"
    magnitude = abs(value)
    if value == 0 or not math.isfinite(value) or not 1e-15 <= magnitude < 1e18:
        return f"{value:g} {unit}"
    for scale, prefix in _PREFIXES:
        if magnitude >= scale * (1 - 1e-9):
            return f"{value / scale:.4g} {prefix}{unit}"
    return f"{value:g} {unit}"


@dataclass(frozen=True)
class Range:
    """The plausible values of one quantity and why those bounds.

    ``low_open``/``high_open`` leave that end itself out (a resistance above 0, a fraction
    below 1).
    """

    low: float
    high: float
    unit: str
    why: str
    low_open: bool = False
    high_open: bool = False

    def contains(self, value: float) -> bool:
        """True when ``value`` is finite and inside the range."""
        if not math.isfinite(value):
            return False
        above = value > self.low if self.low_open else value >= self.low
        below = value < self.high if self.high_open else value <= self.high
        return above and below

    def text(self) -> str:
        """The range in words: ``10 pF to 1 F``, ``above 0 Ω and at most 1 MΩ``."""
        low, high = quantity(self.low, self.unit), quantity(self.high, self.unit)
        if self.low_open and self.high_open:
            return f"above {low} and below {high}"
        if self.low_open:
            return f"above {low} and at most {high}"
        if self.high_open:
            return f"{low} or more and below {high}"
        return f"{low} to {high}"

    def problem(self, value: float) -> str | None:
        """Why ``value`` is not plausible (one phrase), or None when it is."""
        if self.contains(value):
            return None
        if not math.isfinite(value):
            return f"is {value!r}, expected a finite number, {self.text()}"
        return f"is {value:g}, expected {self.text()} ({self.why})"
