"""The meter interface every driver implements: required methods and optional capabilities.

A driver must ``connect``, ``read`` and ``close``. What only some meters can do is a
capability: a class flag saying whether it has it and a method whose default does nothing
(or refuses), so callers ask the flag instead of probing for attributes.

- ``places_probe`` / ``place_probe(at)``: the tool says where the probe is (the simulated
  meter); on a real meter a person holds the probe and the call does nothing.
- ``quantities`` / ``set_quantity(q)``: the kinds of reading the meter can be set to; asking
  for another is a ``MeterSettingsError``. A SCPI meter sends its set-up command; others only
  note the kind their samples carry.

A reading is a ``Measurement`` sample: the meter's quantity, the value, the meter as its
source (its identity once it has said it, else its name), not placed and not settled.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import replace
from typing import ClassVar

from fieldtool.core.measurement import DC, Measurement, Quantity, Source
from fieldtool.core.times import now_utc
from fieldtool.meters.errors import MeterSettingsError


class Meter(ABC):
    """A meter the tool reads samples from.

    Args:
        name: what to call the meter until it says who it is (e.g. "scpi meter on /dev/ttyUSB0").
    """

    places_probe: ClassVar[bool] = False
    quantities: ClassVar[frozenset[str]] = frozenset({DC.name})
    source_kind: ClassVar[str] = "meter"

    def __init__(self, name: str) -> None:
        self.name = name
        self.identity: str | None = None
        self.quantity: Quantity = DC

    @property
    def source(self) -> Source:
        """The meter as the source of its samples."""
        return Source(self.source_kind, self.identity or self.name)

    @abstractmethod
    def connect(self) -> str | None:
        """Get the meter ready and return its identity, if it has one to tell.

        Raises:
            MeterConnectionError: the port is missing, busy or went away.
            MeterSetupError: the meter answers but not as the settings say it should.
            MeterTimeout: it did not answer in time.
        """

    @abstractmethod
    def read(self) -> Measurement:
        """One sample (see module docstring).

        Raises:
            MeterTransientError: this reading failed (a timeout); the next may work.
            MeterConnectionError: the meter went away.
            MeterSetupError: it keeps sending what is not a reading.
        """

    @abstractmethod
    def close(self) -> None:
        """Release the meter; closing twice is harmless."""

    def place_probe(self, at: str | None) -> None:  # noqa: B027 (an optional capability)
        """Put the probe on a node (None: lift it). Does nothing unless ``places_probe``."""

    def set_quantity(self, quantity: Quantity) -> None:
        """Set the meter to measure ``quantity``.

        Raises:
            MeterSettingsError: the meter cannot measure that kind.
        """
        if quantity.name not in self.quantities:
            kinds = ", ".join(sorted(self.quantities))
            raise MeterSettingsError(
                f"{self.identity or self.name} cannot measure {quantity.words}; it reads {kinds}"
            )
        self.quantity = quantity

    def stamped(self, sample: Measurement) -> Measurement:
        """A sample with the time it was taken."""
        return replace(sample, taken=now_utc())
