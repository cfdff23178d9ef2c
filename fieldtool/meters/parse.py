"""Pure parsers for readings: typed by a technician, sent by SCPI meters, streamed lines.

Each returns a ``Measurement`` of the quantity asked for (DC volts unless told otherwise),
not placed yet; a meter's is a raw sample (not settled), a typed one is as the technician
judged it (settled).
"""

from __future__ import annotations

import math
import re

from fieldtool.core.errors import shown
from fieldtool.core.measurement import DC, TYPED, Measurement, Quantity, Source
from fieldtool.core.units import (
    OVERLOAD_WORDS,
    READING_EXAMPLES,
    decimal,
    parse_reading,
)
from fieldtool.meters.errors import MeterGarbage, ReadingParseError

# SCPI uses +9.9E37 for overload (+inf), -9.9E37 for -inf and 9.91E37 for not-a-number.
SCPI_NO_READING = 9.9e37

_NR = re.compile(r"^\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*$")

UNIT_NAMES = {"V": "voltage", "A": "current"}  # for messages: "not a voltage unit"
EXPECTED = f"a voltage such as {READING_EXAMPLES}"
_EXPECTED_OF = {
    "current": "a current such as 0.35mA, 350uA, 0.00035 or 0,35 mA, or OL for overload",
    "diode-test": "a diode-test reading such as 0.61, 0.61V or 610mV, or OL (open)",
}


def expected_text(quantity: Quantity = DC) -> str:
    """What a typed reading of ``quantity`` looks like, for messages and hints."""
    return _EXPECTED_OF.get(quantity.name, EXPECTED)


def parse_typed(
    text: str, quantity: Quantity = DC, conditions: tuple[tuple[str, float], ...] = ()
) -> Measurement:
    """Parse what a technician typed as a reading of ``quantity`` (with its ``conditions``):
    ``12.9``, ``12,9 V``, ``890mV``, ``1.2kV`` for volts, ``0.35mA``, ``350uA`` for a current,
    ``OL``.

    Whether the value is one this board could show is the session's to judge
    (``fieldtool.core.circuit.reading_range``); here it must be a finite number in a unit of
    the quantity.
    """
    expected = expected_text(quantity)
    if not text.strip():
        raise ReadingParseError(f"nothing was typed; expected {expected}")
    try:
        value = parse_reading(text, quantity.unit)
    except ValueError as exc:
        raise ReadingParseError(f"{exc}; expected {expected}") from None
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
        raise MeterGarbage(f"meter answered {shown(stripped)}, which is not an IEEE 488.2 number")
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
    if value_text.lower() in OVERLOAD_WORDS:
        return None, unit
    try:
        value = decimal(value_text)
    except ValueError:
        msg = f"streamed value {shown(value_text)} in line {shown(line)} is not a number"
        raise MeterGarbage(msg) from None
    if math.isnan(value):
        raise MeterGarbage(f"streamed value {shown(value_text)} is not a number (NaN)")
    # infinity too: the meter's way of saying over range
    return (None if abs(value) >= SCPI_NO_READING else value), unit
