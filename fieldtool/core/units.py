"""Numbers as technicians write them: SI prefixes and units (``47k``, ``2.2MΩ``, ``30%``)."""

from __future__ import annotations

import math
import re

from fieldtool.core.errors import shown

_SI = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3, "": 1.0}
_SI.update({"k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9})
_NUMBER = re.compile(
    r"^\s*(?P<num>[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*"
    r"(?P<prefix>[pnuµμmkKMG]?)\s*(?P<unit>ohms?|Ω|%|x|×|)\s*$"
)


def parse_si(text: str) -> float:
    """A number with an optional SI prefix and unit: ``47k``, ``2.2MΩ``, ``0.3``, ``30%``."""
    match = _NUMBER.match(text)
    if match is None:
        raise ValueError(text)
    value = float(match["num"]) * _SI[match["prefix"]]
    if match["unit"] == "%":
        value /= 100.0
    if not math.isfinite(value):
        raise ValueError(text)
    return value


def format_si(value: float, digits: int = 4) -> str:
    """A compact SI spelling that ``parse_si`` reads back: 47000 → ``47k``; ``digits``
    significant figures at most."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g}"
    for scale, prefix in ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m")):
        if abs(value) >= scale:
            return f"{value / scale:.{digits}g}{prefix}"
    return f"{value:.{max(digits - 1, 1)}g}"


# --- readings as technicians and meters write them ---------------------------------------
# One parser for every value a technician types or a file holds, in any registered unit: the
# typed entry, the readings file (both forms) and a streamed meter line all go through
# ``parse_reading`` / ``unit_scale``, so ``890mV`` means the same wherever it is written.

READING_PREFIXES = {"": 1.0, "n": 1e-9, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "k": 1e3}
OHM_PREFIXES = {**READING_PREFIXES, "K": 1e3, "M": 1e6, "G": 1e9}  # no milli-ohm shouting: 'MΩ'
OHM_WORDS = ("ohms", "ohm", "Ω", "R")  # 47kohm, 47 kΩ, and 47R as resistors are marked
OVERLOAD_WORDS = frozenset({"ol", "overload", "o.l", "o.l."})
READING_NUMBER = r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?"
_READING = re.compile(rf"^\s*(?P<value>{READING_NUMBER})\s*(?P<unit>[a-zA-ZµμΩ]*)\s*$")
READING_EXAMPLES = "12.9, 12.9V, 890mV, 1.2kV or 12,9, or OL for overload"
UNITS = ("V", "A", "Ω")  # the base units a reading or a reading's setting is held in


def unit_scale(unit: str, base: str = "V") -> float | None:
    """Base units per ``unit``: ``V``, ``mV``, ``uV``, ``µV``, ``kV`` for volts, the same
    prefixes (and ``n``) for amps, and for ohms ``Ω``/``ohm``/``ohms``/``R`` or a bare prefix
    (``47k``, ``2.2MΩ``); None if it is not that base unit. No unit at all means the base unit.
    """
    if unit == "":
        return 1.0
    if base == "Ω":
        for word in OHM_WORDS:
            if unit.lower().endswith(word.lower()):
                return OHM_PREFIXES.get(unit[: len(unit) - len(word)])
        return OHM_PREFIXES.get(unit)
    if unit[-1].lower() != base.lower():
        return None
    prefix = unit[:-1]
    if prefix in ("M", "K"):  # 'MV' is ambiguous; 'KV' is a common shouting of kV
        return 1e3 if prefix == "K" else None
    return READING_PREFIXES.get(prefix)


def decimal(text: str) -> float:
    """A float from text that may use a decimal comma (ValueError when it is not one)."""
    return float(text.replace(",", "."))


def parse_reading(text: str, base: str = "V") -> float | None:
    """A value as typed or exported, in ``base`` units (``V``, ``A`` or ``Ω``): ``12.9``,
    ``12,9 V``, ``890mV``, ``1.2kV``, ``350uA``, ``47k``; None for ``OL`` (over range).
    ValueError says, in words, what was not understood; the value it returns is finite."""
    stripped = text.strip()
    if stripped.lower() in OVERLOAD_WORDS:
        return None
    if not stripped:
        raise ValueError("no value")
    match = _READING.match(stripped)
    if match is None:
        raise ValueError(f"{shown(stripped)} is not a number with a unit")
    scale = unit_scale(match["unit"], base)
    if scale is None:
        number = match["value"] if len(match["value"]) <= 40 else shown(match["value"])
        raise ValueError(f"understood the number {number} but not the unit {shown(match['unit'])}")
    value = decimal(match["value"]) * scale
    if not math.isfinite(value):
        raise ValueError(f"{shown(stripped)} is not a finite number")
    return value
