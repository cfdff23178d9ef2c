"""The reading loop: open the meter, ask who it is, read, sort the errors, tell a listener.

The loop is kept apart from what handles its samples, in the way pyserial's ``ReaderThread``
hands data to a ``Protocol``: a ``MeterLoop`` does the I/O and calls its ``MeterListener``
with what happened: ``connected``, each ``received`` sample (placed at the node the probe was
on), a reading that ``failed`` and will be tried again, a kind the meter ``refused`` (it goes
on reading the kind it is in), and ``lost`` when the loop stops because the meter went away
or is set up wrongly. ``run`` blocks, so the caller chooses the thread (a Textual thread
worker in the terminal UI, ``start`` for a plain daemon thread).

Where the probe is, which kind to read and whether the board is powered are asked for from any
thread (``place_probe``, ``set_quantity``, ``set_board``) and handed to the meter on the loop's
own thread before its next reading.
"""

from __future__ import annotations

import threading
from collections.abc import Callable

from fieldtool.core.errors import FieldtoolError
from fieldtool.core.measurement import DC, Measurement, Quantity, Source
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterSettingsError, MeterTransientError

PAUSE_S = 0.2  # between samples; each read's own timeout bounds how long one can take
_UNPLACED = object()


class MeterListener:
    """What a running ``MeterLoop`` tells, each call on the loop's own thread; by default
    nothing is done with it."""

    def started(self, loop: MeterLoop) -> None:
        """The loop is about to open the meter; keep ``loop`` to stop it later."""

    def connected(self, source: Source) -> None:
        """The meter answered; ``source`` names it (its identity, or its port)."""

    def received(self, sample: Measurement) -> None:
        """A sample, placed at the node the probe was on when it was read (None: lifted)."""

    def failed(self, error: MeterTransientError) -> None:
        """This reading failed (a timeout); the loop goes on and asks again."""

    def refused(self, error: MeterSettingsError) -> None:
        """The meter cannot be set to the kind asked for; it goes on reading the one it is in."""

    def lost(self, error: FieldtoolError) -> None:
        """The loop has stopped: the meter could not be opened, went away, or sends what is
        not a reading. A new loop connects again."""


class MeterLoop:
    """Read a meter until stopped, telling ``listener`` what happens.

    Args:
        open_meter: returns the meter, not yet connected (called on the loop's thread).
        listener: told what happens (see ``MeterListener``).
        pause_s: the wait between samples.
    """

    def __init__(
        self,
        open_meter: Callable[[], Meter],
        listener: MeterListener,
        *,
        pause_s: float = PAUSE_S,
    ) -> None:
        self.open_meter = open_meter
        self.listener = listener
        self.pause_s = pause_s
        self._at: str | None = None
        self._kind: tuple[Quantity, tuple[tuple[str, float], ...]] = (DC, ())
        self._board: tuple[bool, float | None] = (True, None)
        self._stop = threading.Event()

    def place_probe(self, at: str | None) -> None:
        """Where the probe is from now on (any thread); samples are placed there."""
        self._at = at

    def set_quantity(
        self, quantity: Quantity, conditions: tuple[tuple[str, float], ...] = ()
    ) -> None:
        """The kind to read from now on (any thread), with its conditions."""
        self._kind = (quantity, tuple(conditions))

    def set_board(self, powered: bool, test_load_ohms: float | None = None) -> None:
        """Whether the board is powered and which test load is clipped on, from now on (any
        thread; the simulated board)."""
        self._board = (powered, test_load_ohms)

    def stop(self) -> None:
        """Ask the loop to end after the read under way; nothing more is told."""
        self._stop.set()

    @property
    def stopped(self) -> bool:
        """True once ``stop`` was asked."""
        return self._stop.is_set()

    def start(self) -> threading.Thread:
        """Run the loop on a daemon thread of its own and return the thread."""
        thread = threading.Thread(target=self.run, name="meter-loop", daemon=True)
        thread.start()
        return thread

    def _tell(self, call: Callable[..., None], *args: object) -> None:
        if not self._stop.is_set():
            call(*args)

    def run(self) -> None:
        """Open, connect, then read until stopped or lost (blocks; see module docstring)."""
        self.listener.started(self)
        try:
            meter = self.open_meter()
        except FieldtoolError as exc:
            self._tell(self.listener.lost, exc)
            return
        try:
            meter.connect()
            self._tell(self.listener.connected, meter.source)
            self._read(meter)
        except FieldtoolError as exc:
            self._tell(self.listener.lost, exc)
        finally:
            meter.close()

    def _read(self, meter: Meter) -> None:
        placed: object = _UNPLACED
        kind: object = _UNPLACED
        board: object = _UNPLACED
        while not self._stop.is_set():
            if self._board != board:
                board = self._board
                if meter.plays_board:
                    meter.set_board(*self._board)
            if self._kind != kind:
                kind = self._kind
                try:
                    meter.set_quantity(*self._kind)
                except MeterSettingsError as exc:
                    self._tell(self.listener.refused, exc)
            at = self._at
            if at != placed:
                if meter.places_probe:
                    meter.place_probe(at)
                placed = at
            try:
                sample = meter.read()
            except MeterTransientError as exc:
                self._tell(self.listener.failed, exc)
                continue
            self._tell(self.listener.received, sample.placed(at))
            self._stop.wait(self.pause_s)
