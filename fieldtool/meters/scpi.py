"""A SCPI (IEEE 488.2) bench meter read over a transport."""

from __future__ import annotations

import time
from collections.abc import Callable

from fieldtool.core.measurement import Measurement
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterGarbage
from fieldtool.meters.parse import parse_scpi_number
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.transport import Transport


class ScpiMeter(Meter):
    """Ask a SCPI meter who it is, set it to DC volts, then read on request."""

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
        """Identify the meter (``*IDN?``) and configure DC volts; return the identity."""
        self.transport.discard_stale()
        identity = self._ask("*IDN?")
        if not identity or not identity.isprintable():
            raise MeterGarbage(f"meter answered *IDN? with {identity!r}; check baud rate")
        self.identity = identity
        if self.settings.configure_command:
            self._send(self.settings.configure_command)
        return identity

    def read(self) -> Measurement:
        """One sample; a garbled answer is retried once, then MeterGarbage."""
        try:
            answer = self._ask(self.settings.read_command)
            return self.stamped(parse_scpi_number(answer, self.source, self.quantity))
        except MeterGarbage:
            self.transport.discard_stale()
            answer = self._ask(self.settings.read_command)
            return self.stamped(parse_scpi_number(answer, self.source, self.quantity))

    def close(self) -> None:
        """Release the transport."""
        self.transport.close()
