"""The meter interface every driver implements: required methods and optional capabilities.

A driver must ``connect``, ``read`` and ``close``. What only some meters can do is a
capability: a class flag saying whether it has it and a method whose default does nothing
(or refuses), so callers ask the flag instead of probing for attributes.

- ``places_probe`` / ``place_probe(at)``: the tool says where the probe is (the simulated
  meter); on a real meter a person holds the probe and the call does nothing.
- ``quantities`` / ``set_quantity(q, conditions)``: the kinds of reading the meter can be set
  to (a class default a driver may narrow per instance, from its settings); asking for another
  is a ``MeterSettingsError``. A SCPI meter sends the kind's set-up command when it differs
  from the one in force and checks the meter's error queue; a streaming meter notes the kind
  and reads the one each line's unit shows; the simulated meter plays it. The conditions
  (a test load's ohms for ``dc-loaded``) travel on each sample.
- ``plays_board`` / ``set_board(powered, test_load_ohms)``: the tool switches the board on
  and off and clips a test load on (the simulated board); a real board is handled by a
  person and the call does nothing.

A reading is a ``Measurement`` sample: the meter's quantity and conditions, the value, the
meter as its source (its identity once it has said it, else its name), not placed and not
settled.
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
    plays_board: ClassVar[bool] = False
    quantities: frozenset[str] = frozenset({DC.name})  # a driver may set its own per instance
    source_kind: ClassVar[str] = "meter"

    def __init__(self, name: str) -> None:
        self.name = name
        self.identity: str | None = None
        self.quantity: Quantity = DC
        self.conditions: tuple[tuple[str, float], ...] = ()

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

    def set_board(  # noqa: B027 (an optional capability)
        self, powered: bool, test_load_ohms: float | None = None
    ) -> None:
        """Switch the board on or off, with a test load of ``test_load_ohms`` from the output
        to ground (None: none). Does nothing unless ``plays_board``."""

    def set_quantity(
        self, quantity: Quantity, conditions: tuple[tuple[str, float], ...] = ()
    ) -> None:
        """Set the meter to measure ``quantity``; its samples carry ``conditions``.

        Raises:
            MeterSettingsError: the meter cannot measure that kind, the conditions are not
                the kind's settings, or the meter refused its set-up.
        """
        if quantity.name not in self.quantities:
            kinds = ", ".join(sorted(self.quantities))
            raise MeterSettingsError(
                f"{self.identity or self.name} cannot measure {quantity.words}; it reads {kinds}"
            )
        names = sorted(name for name, _ in conditions)
        if names != sorted(quantity.conditions):
            wanted = ", ".join(quantity.conditions) or "none"
            raise MeterSettingsError(
                f"{quantity.words} needs the settings {wanted}, not {', '.join(names) or 'none'}"
            )
        self._setup(quantity)
        self.quantity = quantity
        self.conditions = tuple(conditions)

    def _setup(self, quantity: Quantity) -> None:  # noqa: B027 (drivers that send a set-up)
        """Put the meter in the mode for ``quantity`` (raise MeterSettingsError if refused)."""

    def sample_of(self, value: float | None) -> Measurement:
        """A sample of the meter's quantity (None: over range), stamped now."""
        return self.stamped(
            Measurement(None, self.quantity, value, self.source, conditions=self.conditions)
        )

    def stamped(self, sample: Measurement) -> Measurement:
        """A sample with the time it was taken."""
        return replace(sample, taken=now_utc())
