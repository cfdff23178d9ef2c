"""Pure helpers the screens share: node verdicts, number formats, bars, words for people."""

from __future__ import annotations

import math
from dataclasses import dataclass

from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.faults import Fault, describe
from fieldtool.core.diagnosis.ranking import Diagnosis
from fieldtool.core.measurement import DC, Quantity
from fieldtool.core.plausible import Range
from fieldtool.core.session import BoardSession
from fieldtool.core.words import conditions_words, reading_words

# Each state has a symbol and a word, so it never rests on colour alone.
UNREAD, IN_BAND, HIGH, LOW, OVERLOAD = "unread", "in band", "high", "low", "over range"
WRONG_RANGE = "wrong range?"  # a value no node of the board could show (an older history's)
SYMBOL = {UNREAD: "·", IN_BAND: "✓", HIGH: "▲", LOW: "▼", OVERLOAD: "⊘", WRONG_RANGE: "?"}
SHORT = {UNREAD: "—", IN_BAND: "ok", HIGH: "high", LOW: "low", OVERLOAD: "OL"}
SHORT[WRONG_RANGE] = "range?"
STYLE = {
    UNREAD: "$text-muted",
    IN_BAND: "$text-success",
    HIGH: "bold $text-error",
    LOW: "bold $text-error",
    OVERLOAD: "bold $text-warning",
    WRONG_RANGE: "bold $text-warning",
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


def verdict(
    expected: float,
    low: float,
    high: float,
    volts: float | None,
    read: bool,
    plausible: Range | None = None,
) -> Verdict:
    """Compare a reading with its band; ``read`` False means the node is not measured yet; a
    value outside ``plausible`` (what any node of the board could show) is a wrong range."""
    if not read:
        return Verdict(UNREAD, None, None)
    if volts is None:
        return Verdict(OVERLOAD, None, None)
    if plausible is not None and not plausible.contains(volts):
        return Verdict(WRONG_RANGE, None, None)
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
    if abs(volts) >= 1e6:  # far beyond any node: short (1e300, -2.5e7), never 300 digits
        exponent = int(math.floor(math.log10(abs(volts))))
        return f"{volts / 10**exponent:.{digits - 2}g}e{exponent}"
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
    d = v.deviation
    if abs(d) >= 1e5:  # a value no board shows: short, never a long field
        text = f"{d:+.1e}"
    elif abs(d) >= 10:
        text = f"{d:+.0f}"
    elif abs(d) >= 1:
        text = f"{d:+.2g}"
    else:
        text = f"{d:+.2f}"  # never 1.4e-05 for a reading on its expectation
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


def suspect_ref(key: str) -> str | None:
    """The default designator or board target a hypothesis key names (None for healthy)."""
    return None if key == "healthy" else key.split(":", 1)[0]


def ladder_ranks(diagnosis: Diagnosis) -> dict[str, int]:
    """The parts of the top three suspects (5 % or more) and their rank, for the ladder."""
    ranks: dict[str, int] = {}
    for s in diagnosis.suspects:
        ref = suspect_ref(s.key)
        if ref is None or ref in ranks or s.probability < 0.05:
            continue
        ranks[ref] = len(ranks) + 1
        if len(ranks) == 3:
            break
    return ranks


_EXAMPLES = {
    "current": "0.35mA, 350uA or OL",
    "diode-test": "0.61, 610mV or OL",
    "ripple-pp": "31mV, 0.031 or OL",
    "ac-rms": "9mV, 0.009 or OL",
}


def entry_hint(at: str | None, quantity: Quantity = DC) -> str:
    """What to type into the reading entry for ``quantity`` at ``at``."""
    if quantity == DC:
        return f"volts at {at}: 12.9, 890mV, 1.2kV or OL, then Enter"
    examples = _EXAMPLES.get(quantity.name, "12.9, 890mV or OL")
    return f"{quantity.words} at {at}: {examples}, then Enter"


def reveal_text(session: BoardSession, fault: Fault) -> str:
    """Whether the tool (and the technician) found the demo's hidden fault."""
    p = session.profile
    hidden = describe(fault, p)
    target = display_name(p, fault.target)
    repaired = [a for a in session.actions if a.designator == target]
    if repaired:
        verdict = f"Found: you worked on {target}."
    else:
        done = ", ".join(a.designator for a in session.actions) or "no part"
        verdict = f"Not found: you worked on {done}."
    tool = "; ".join(f"{w} ({odds:.0%})" for w, odds in session.at_repairs)
    ranked = f" The tool's top suspect when you repaired: {tool}." if tool else ""
    read = ", ".join(f"{n} {volts_text(x)} V" for n, x in session.volts_by_node().items())
    if session.actions:
        after = f"Readings after the last repair: {read or 'none'}."
    else:
        after = f"No repair was recorded. Readings: {read or 'none'}."
    return f"The hidden fault was {hidden}. {verdict}{ranked}{found_by(session, fault)} {after}"


def found_by(session: BoardSession, fault: Fault) -> str:
    """Which reading found the hidden fault (raised its odds most), in a sentence with a
    leading space; "" when none raised it."""
    m, odds = session.deciding(fault.key)
    if m is None:
        return ""
    value = "OL" if m.value is None else reading_words(m.value, m.unit)
    what = m.quantity.words + conditions_words(m.conditions)
    return f" The reading that found it: {what} at {m.at} = {value} ({odds:.0%} after all)."
