"""Numbers as technicians write them: SI prefixes and units (``47k``, ``2.2MΩ``, ``30%``)."""

from __future__ import annotations

import math
import re

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
