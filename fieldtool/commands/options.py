"""Checked types for the numbers given on the command line.

Every numeric option is parsed by one of these instead of a bare ``float`` or ``int``: a value
that is not a number, not finite or outside its plausible range is refused by argparse itself,
so it prints one line and exits with code 2 before any work starts. Numbers take SI prefixes as
elsewhere in the tool (``470k``, ``200m``).
"""

from __future__ import annotations

import argparse
from collections.abc import Callable

from fieldtool.core.errors import shown
from fieldtool.core.names import technician_problem
from fieldtool.core.plausible import Range
from fieldtool.core.units import parse_si


def number(limit: Range, what: str) -> Callable[[str], float]:
    """An argparse type for a number in ``limit``; ``what`` names it in the message."""

    def parse(text: str) -> float:
        try:
            value = parse_si(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{shown(text)} is not a number; expected {what}, {limit.text()}"
            ) from None
        problem = limit.problem(value)
        if problem:
            raise argparse.ArgumentTypeError(f"{what} {problem}")
        return value

    parse.__name__ = what  # argparse names the type in its own messages
    return parse


def whole(low: int, high: int, what: str, why: str) -> Callable[[str], int]:
    """An argparse type for a whole number from ``low`` to ``high``, ``why`` those bounds."""

    def parse(text: str) -> int:
        try:
            value = int(text.strip(), 10)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{shown(text)} is not a whole number; expected {what} from {low} to {high}"
            ) from None
        if not low <= value <= high:
            raise argparse.ArgumentTypeError(
                f"{what} {shown(value)} is out of range; expected {low} to {high} ({why})"
            )
        return value

    parse.__name__ = what
    return parse


SEED = whole(
    0,
    2**32 - 1,
    "seed",
    "the simulated meter's noise generator takes a non-negative 32-bit number",
)


def technician(text: str) -> str:
    """An argparse type for who signs a session: a name or initials, one short line."""
    problem = technician_problem(text.strip())
    if problem:
        raise argparse.ArgumentTypeError(f"technician {shown(text)} {problem}")
    return text.strip()
