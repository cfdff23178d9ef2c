"""Shared by the tests: measurements and the history events that carry them, briefly."""

from __future__ import annotations

from fieldtool.core import history as h
from fieldtool.core.measurement import DC, TYPED, Measurement, Source


def dc(at: str | None, volts: float | None, source: Source = TYPED, **extra) -> Measurement:
    """A DC reading at ``at`` (None volts: over range), settled unless told otherwise."""
    extra.setdefault("settled", True)
    return Measurement(at, DC, volts, source, **extra)


def reading(at: str, volts: float | None, **extra) -> h.Reading:
    """A history reading event of a DC measurement."""
    return h.Reading(dc(at, volts, **extra))


def verification(at: str, volts: float | None, **extra) -> h.Verification:
    """A history verification event of a DC measurement."""
    return h.Verification(dc(at, volts, **extra))
