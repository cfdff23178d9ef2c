"""A SCPI (IEEE 488.2) bench meter read over a transport.

It is asked who it is (``*IDN?``), its error queue is cleared (``*CLS``), and it is set up for
the kind asked for: the kind's set-up command from the settings (``MeterSettings.
setup_command``: ``CONF:VOLT:DC``, ``CONF:VOLT:AC``, ``CONF:CURR:DC``, ``CONF:DIOD`` unless the
settings file says otherwise), sent only when it differs from the one in force, then
``SYST:ERR?`` to hear whether the meter took it (SCPI's error queue: ``0,"No error"`` when it
is empty). Readings are the settings' ``read_command`` (``READ?``) in the base unit of the
kind (volts, amps).
"""

from __future__ import annotations

import time
from collections.abc import Callable

from fieldtool.core.measurement import QUANTITIES, Measurement, Quantity
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterGarbage, MeterSettingsError
from fieldtool.meters.parse import parse_scpi_number
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.transport import Transport

MAX_ERRORS_READ = 10  # SCPI error queues hold at least this many; stop reading after them


def scpi_error_code(answer: str) -> int | None:
    """The error number of a ``SYST:ERR?`` answer (``-113,"Undefined header"`` → -113); None
    when the answer is not ``number,"text"``."""
    head = answer.split(",", 1)[0].strip()
    try:
        return int(head)
    except ValueError:
        return None


class ScpiMeter(Meter):
    """Ask a SCPI meter who it is, set it up for the kind asked for, then read on request."""

    def __init__(
        self,
        transport: Transport,
        settings: MeterSettings | None = None,
        *,
        clock: Callable[[], float] = time.monotonic,
        sleep: Callable[[float], None] = time.sleep,
    ) -> None:
        super().__init__(f"scpi meter on {transport.name}")
        self.transport = transport
        self.settings = settings or MeterSettings()
        self.clock = clock
        self.sleep = sleep
        self._last_sent: float | None = None
        self._in_force: str | None = None  # the set-up command the meter is in
        self.quantities = frozenset(
            q.name for q in QUANTITIES.values() if self.settings.setup_command(q)
        )

    def _send(self, command: str) -> None:
        """Send one command, first waiting out ``command_delay_s`` since the previous one."""
        delay = self.settings.command_delay_s
        if delay > 0 and self._last_sent is not None:
            wait = delay - (self.clock() - self._last_sent)
            if wait > 0:
                self.sleep(wait)
        self.transport.write((command + self.settings.terminator).encode("ascii"))
        self._last_sent = self.clock()

    def _ask(self, command: str) -> str:
        self._send(command)
        raw = self.transport.readline(self.settings.timeout_s)
        return raw.decode("ascii", errors="replace").strip()

    def connect(self) -> str:
        """Identify the meter (``*IDN?``) and set it up for its kind; return the identity.

        Raises:
            MeterSettingsError: the meter refused the set-up (``SYST:ERR?``).
        """
        self.transport.discard_stale()
        identity = self._ask("*IDN?")
        if not identity or not identity.isprintable():
            raise MeterGarbage(f"meter answered *IDN? with {identity!r}; check baud rate")
        self.identity = identity
        if self.settings.check_errors:
            self._send("*CLS")  # errors left from before are not ours to report
        self._in_force = None
        self._setup(self.quantity)
        return identity

    def _setup(self, quantity: Quantity) -> None:
        """Send the kind's set-up if it is not the one in force, then check the error queue."""
        command = self.settings.setup_command(quantity)
        if not command or command == self._in_force:
            return
        self._send(command)
        self._in_force = None  # until the meter says it took it
        if self.settings.check_errors:
            self._check_errors(command, quantity)
        self._in_force = command

    def _check_errors(self, command: str, quantity: Quantity) -> None:
        """Read ``SYST:ERR?`` until the queue is empty; refuse the set-up if it held errors."""
        errors = []
        for _ in range(MAX_ERRORS_READ):
            answer = self._ask("SYST:ERR?")
            code = scpi_error_code(answer)
            if code is None:
                raise MeterGarbage(
                    f"meter answered SYST:ERR? with {answer!r}, not an error entry; if it has "
                    "no error queue, set check_errors = false in the meter settings"
                )
            if code == 0:
                break
            errors.append(answer)
        if errors:
            raise MeterSettingsError(
                f"{self.identity or self.name} refused {command!r} for {quantity.words} "
                f"({'; '.join(errors)}); give its own command in the meter settings "
                f'([configure] {quantity.name} = "..."), or "" if it has no such mode'
            )

    def read(self) -> Measurement:
        """One sample; a garbled answer is retried once, then MeterGarbage."""
        try:
            return self._read_once()
        except MeterGarbage:
            self.transport.discard_stale()
            return self._read_once()

    def _read_once(self) -> Measurement:
        answer = self._ask(self.settings.read_command)
        return self.stamped(parse_scpi_number(answer, self.source, self.quantity, self.conditions))

    def close(self) -> None:
        """Release the transport."""
        self.transport.close()
