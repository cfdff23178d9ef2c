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
    unit_scale,
)
from fieldtool.meters.errors import MeterGarbage, ReadingParseError

# SCPI uses +9.9E37 for overload (+inf), -9.9E37 for -inf and 9.91E37 for not-a-number.
SCPI_NO_READING = 9.9e37

_NR = re.compile(r"^\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*$")

UNIT_NAMES = {"V": "voltage", "A": "current"}  # for messages: "not a voltage unit"
EXPECTED = f"a voltage such as {READING_EXAMPLES}"


def parse_typed(text: str, quantity: Quantity = DC) -> Measurement:
    """Parse what a technician typed: ``12.9``, ``12,9 V``, ``890mV``, ``1.2kV``, ``OL``.

    Whether the value is one this board could show is the session's to judge
    (``fieldtool.core.circuit.reading_range``); here it must be a finite number in a unit of
    the quantity.
    """
    if not text.strip():
        raise ReadingParseError(f"nothing was typed; expected {EXPECTED}")
    try:
        value = parse_reading(text, quantity.unit)
    except ValueError as exc:
        raise ReadingParseError(f"{exc}; expected {EXPECTED}") from None
    return Measurement(None, quantity, value, TYPED, settled=True)


def parse_scpi_number(text: str, source: Source, quantity: Quantity = DC) -> Measurement:
    """Parse an IEEE 488.2 NR1/NR2/NR3 response; |x| >= 9.9e37 means overload."""
    stripped = text.strip()
    if not _NR.match(stripped):
        raise MeterGarbage(f"meter answered {shown(stripped)}, which is not an IEEE 488.2 number")
    value = float(stripped)
    if abs(value) >= SCPI_NO_READING:
        return Measurement(None, quantity, None, source)
    return Measurement(None, quantity, value, source)


def parse_stream_line(
    line: str, regex: str | re.Pattern[str], source: Source, quantity: Quantity = DC
) -> Measurement | None:
    """Parse one streamed line with a regex holding groups ``value`` and optional ``unit``.

    Returns None when the line does not match (a status line, noise); raises MeterGarbage
    when it matches but the value or unit cannot be understood.
    """
    pattern = re.compile(regex) if isinstance(regex, str) else regex
    match = pattern.search(line)
    if match is None:
        return None
    groups = match.groupdict()
    value_text = (groups.get("value") or "").strip()
    unit = (groups.get("unit") or "").strip()
    if value_text.lower() in OVERLOAD_WORDS:
        return Measurement(None, quantity, None, source)
    try:
        value = decimal(value_text)
    except ValueError:
        msg = f"streamed value {shown(value_text)} in line {shown(line)} is not a number"
        raise MeterGarbage(msg) from None
    if math.isnan(value):
        raise MeterGarbage(f"streamed value {shown(value_text)} is not a number (NaN)")
    if abs(value) >= SCPI_NO_READING:  # infinity too: the meter's way of saying over range
        return Measurement(None, quantity, None, source)
    scale = unit_scale(unit, quantity.unit)
    if scale is None:
        what = UNIT_NAMES.get(quantity.unit, quantity.unit)
        raise MeterGarbage(
            f"streamed unit {shown(unit)} in line {shown(line)} is not a {what} unit"
        )
    return Measurement(None, quantity, value * scale, source)
