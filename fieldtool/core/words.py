"""Small helpers for the words the tool shows."""

from __future__ import annotations

from fieldtool.core.units import format_si


def count(n: int, word: str, many: str | None = None) -> str:
    """``1 repair``, ``2 repairs``, ``0 repairs``; ``many`` for an irregular plural."""
    return f"{n} {word if n == 1 else (many or word + 's')}"


def conditions_words(conditions: tuple[tuple[str, float], ...]) -> str:
    """A reading's settings in words, with a leading space (``" with a 47 kΩ test load"``),
    or "" when it has none."""
    words = []
    for name, value in conditions:
        if name == "test_load_ohms":
            words.append(f"a {format_si(value)}Ω test load")
        else:
            words.append(f"{name} {value:g}")
    return f" with {' and '.join(words)}" if words else ""


def reading_words(value: float | None, unit: str) -> str:
    """A reading with an SI prefix and its unit (``310 µA``, ``11.2 V``, ``31 mV``), or
    ``OL (over range)``."""
    if value is None:
        return "OL (over range)"
    for scale, prefix in ((1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ")):
        if abs(value) >= scale:
            return f"{value / scale:.4g} {prefix}{unit}"
    return f"{value / 1e-6:.4g} µ{unit}" if value else f"0 {unit}"
