"""Pure parsers for readings: typed by a technician, sent by SCPI meters, streamed lines.

Each returns a ``Measurement`` of the quantity asked for (DC volts unless told otherwise),
not placed yet; a meter's is a raw sample (not settled), a typed one is as the technician
judged it (settled).
"""

from __future__ import annotations

import math
import re

from fieldtool.core.measurement import DC, TYPED, Measurement, Quantity, Source
from fieldtool.meters.errors import MeterGarbage, ReadingParseError

# SCPI uses +9.9E37 for overload (+inf), -9.9E37 for -inf and 9.91E37 for not-a-number.
SCPI_NO_READING = 9.9e37

PREFIXES = {"": 1.0, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "n": 1e-9, "k": 1e3}

_NUMBER = r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?"
_TYPED = re.compile(rf"^\s*(?P<value>{_NUMBER})\s*(?P<unit>[a-zA-Zµμ]*)\s*$")
_NR = re.compile(r"^\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*$")
_OVERLOAD_WORDS = {"ol", "overload", "o.l", "o.l."}

UNIT_NAMES = {"V": "voltage", "A": "current"}  # for messages: "not a voltage unit"
EXPECTED = "a voltage such as 12.9, 12.9V, 890mV, 1.2kV or 12,9, or OL for overload"
_EXPECTED_OF = {
    "current": "a current such as 0.35mA, 350uA, 0.00035 or 0,35 mA, or OL for overload",
    "diode-test": "a diode-test reading such as 0.61, 0.61V or 610mV, or OL (open)",
}


def expected_text(quantity: Quantity = DC) -> str:
    """What a typed reading of ``quantity`` looks like, for messages and hints."""
    return _EXPECTED_OF.get(quantity.name, EXPECTED)


def unit_scale(unit: str, base: str = "V") -> float | None:
    """Base units per ``unit`` (``V``, ``mV``, ``uV``, ``µV``, ``kV`` for volts); None if it is
    not that base unit; no unit at all means the base unit."""
    if unit == "":
        return 1.0
    if unit[-1].lower() != base.lower() or len(base) != 1:
        return None
    prefix = unit[:-1]
    if prefix in ("M", "K"):  # 'MV' is ambiguous; 'KV' is a common shouting of kV
        return 1e3 if prefix == "K" else None
    return PREFIXES.get(prefix)


def _number(text: str) -> float:
    """A float from text that may use a decimal comma."""
    return float(text.replace(",", "."))


def parse_typed(
    text: str, quantity: Quantity = DC, conditions: tuple[tuple[str, float], ...] = ()
) -> Measurement:
    """Parse what a technician typed as a reading of ``quantity`` (with its ``conditions``):
    ``12.9``, ``12,9 V``, ``890mV``, ``1.2kV`` for volts, ``0.35mA``, ``350uA`` for a current,
    ``OL``."""
    expected = expected_text(quantity)
    stripped = text.strip()
    if stripped.lower() in _OVERLOAD_WORDS:
        return Measurement(None, quantity, None, TYPED, settled=True, conditions=conditions)
    if not stripped:
        raise ReadingParseError(f"nothing was typed; expected {expected}")
    match = _TYPED.match(stripped)
    if match is None:
        raise ReadingParseError(f"'{stripped}' is not a number with a unit; expected {expected}")
    value_text, unit = match["value"], match["unit"]
    scale = unit_scale(unit, quantity.unit)
    if scale is None:
        raise ReadingParseError(
            f"understood the number {value_text} but not the unit '{unit}'; expected {expected}"
        )
    value = _number(value_text) * scale
    if not math.isfinite(value):
        what = UNIT_NAMES.get(quantity.unit, "value")
        raise ReadingParseError(f"'{stripped}' is not a finite {what}; expected {expected}")
    return Measurement(None, quantity, value, TYPED, settled=True, conditions=conditions)


def parse_scpi_number(
    text: str,
    source: Source,
    quantity: Quantity = DC,
    conditions: tuple[tuple[str, float], ...] = (),
) -> Measurement:
    """Parse an IEEE 488.2 NR1/NR2/NR3 response; |x| >= 9.9e37 means overload."""
    stripped = text.strip()
    if not _NR.match(stripped):
        raise MeterGarbage(f"meter answered {stripped!r}, which is not an IEEE 488.2 number")
    value = float(stripped)
    number = None if abs(value) >= SCPI_NO_READING else value
    return Measurement(None, quantity, number, source, conditions=conditions)


def stream_fields(line: str, regex: str | re.Pattern[str]) -> tuple[float | None, str] | None:
    """The number (None: over range) and the unit text of one streamed line, matched with a
    regex holding groups ``value`` and optional ``unit``; None when the line does not match
    (a status line, noise).

    Raises:
        MeterGarbage: the line matches but its value is not a number.
    """
    pattern = re.compile(regex) if isinstance(regex, str) else regex
    match = pattern.search(line)
    if match is None:
        return None
    groups = match.groupdict()
    value_text = (groups.get("value") or "").strip()
    unit = (groups.get("unit") or "").strip()
    if value_text.lower() in _OVERLOAD_WORDS:
        return None, unit
    try:
        value = _number(value_text)
    except ValueError:
        msg = f"streamed value {value_text!r} in line {line!r} is not a number"
        raise MeterGarbage(msg) from None
    return (None if abs(value) >= SCPI_NO_READING else value), unit
