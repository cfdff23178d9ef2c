"""Pure helpers the widgets share: node verdicts, number formatting, probability bars."""

from __future__ import annotations

import math
from dataclasses import dataclass

# Each state has a symbol and a word, so it never rests on colour alone.
UNREAD, IN_BAND, HIGH, LOW, OVERLOAD = "unread", "in band", "high", "low", "over range"
SYMBOL = {UNREAD: "·", IN_BAND: "✓", HIGH: "▲", LOW: "▼", OVERLOAD: "⊘"}
SHORT = {UNREAD: "—", IN_BAND: "ok", HIGH: "high", LOW: "low", OVERLOAD: "OL"}
STYLE = {
    UNREAD: "$text-muted",
    IN_BAND: "$text-success",
    HIGH: "bold $text-error",
    LOW: "bold $text-error",
    OVERLOAD: "bold $text-warning",
}


@dataclass(frozen=True)
class Verdict:
    """How one node's reading compares with its band."""

    state: str
    deviation: float | None  # volts read minus expected
    relative: float | None  # deviation / |expected|

    @property
    def symbol(self) -> str:
        """The state's symbol."""
        return SYMBOL[self.state]


def verdict(expected: float, low: float, high: float, volts: float | None, read: bool) -> Verdict:
    """Compare a reading with its band; ``read`` False means the node is not measured yet."""
    if not read:
        return Verdict(UNREAD, None, None)
    if volts is None:
        return Verdict(OVERLOAD, None, None)
    dev = volts - expected
    rel = dev / abs(expected) if abs(expected) > 1e-9 else None
    if volts > high:
        return Verdict(HIGH, dev, rel)
    if volts < low:
        return Verdict(LOW, dev, rel)
    return Verdict(IN_BAND, dev, rel)


def volts_text(volts: float | None, digits: int = 4) -> str:
    """Volts to ``digits`` significant figures without an exponent: ``125.8``, ``0.3301``."""
    if volts is None:
        return "OL"
    if not math.isfinite(volts):
        return "—"
    if volts == 0:
        return "0"
    if abs(volts) >= 1e6:  # far beyond any node: short, never a 300-digit field
        return f"{volts:.{digits - 1}e}"
    magnitude = int(math.floor(math.log10(abs(volts))))
    decimals = min(max(0, digits - 1 - magnitude), 4)  # 0.1 mV: below any meter's resolution
    return f"{volts:.{decimals}f}"


def band_text(low: float, high: float) -> str:
    """A band as ``low…high`` with the precision the wider end needs."""
    return f"{volts_text(low, 3)}…{volts_text(high, 3)}"


def deviation_text(v: Verdict, percent: bool = True) -> str:
    """Signed deviation in volts, with the percentage where it means something."""
    if v.deviation is None:
        return ""
    text = f"{v.deviation:+.2g}" if abs(v.deviation) < 10 else f"{v.deviation:+.0f}"
    if percent and v.relative is not None and abs(v.relative) < 10:
        text += f" ({v.relative:+.0%})"
    return text.replace("-", "−")


def bar(fraction: float, width: int) -> str:
    """A horizontal bar of ``width`` cells, eighth-cell resolution, filled to ``fraction``."""
    fraction = min(max(fraction, 0.0), 1.0)
    eighths = int(round(fraction * width * 8))
    full, part = divmod(eighths, 8)
    partial = " ▏▎▍▌▋▊▉"[part] if part else ""
    return ("█" * full + partial).ljust(width, "·")[:width]


def percent_text(p: float) -> str:
    """A probability as a percentage that never rounds a possibility away: ``<1%``, ``>99%``."""
    if p >= 0.995 and p < 1.0:
        return ">99%"
    if 0 < p < 0.005:
        return "<1%"
    return f"{p:.0%}"
