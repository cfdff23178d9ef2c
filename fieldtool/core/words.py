"""Small helpers for the words the tool shows."""

from __future__ import annotations


def count(n: int, word: str, many: str | None = None) -> str:
    """``1 repair``, ``2 repairs``, ``0 repairs``; ``many`` for an irregular plural."""
    return f"{n} {word if n == 1 else (many or word + 's')}"
