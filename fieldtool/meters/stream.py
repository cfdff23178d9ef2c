"""A meter or logger that prints readings as text lines on its own."""

from __future__ import annotations

import re

from fieldtool.core.measurement import Measurement
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterGarbage
from fieldtool.meters.parse import parse_stream_line
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.transport import Transport

MAX_SKIPPED_LINES = 20


class StreamMeter(Meter):
    """Read the next fresh line from a streaming meter and pull the value out with a regex."""

    def __init__(
        self,
        transport: Transport,
        settings: MeterSettings | None = None,
        max_skipped: int = MAX_SKIPPED_LINES,
    ) -> None:
        super().__init__(f"stream meter on {transport.name}")
        self.transport = transport
        self.settings = settings or MeterSettings(protocol="stream")
        self.pattern = re.compile(self.settings.stream_regex)
        self.max_skipped = max_skipped

    def connect(self) -> None:
        """Streaming meters have no identity to ask for; nothing to do."""
        return None

    def read(self) -> Measurement:
        """The value of the next line that arrives after this call."""
        self.transport.discard_stale()
        skipped: list[str] = []
        while len(skipped) <= self.max_skipped:
            raw = self.transport.readline(self.settings.timeout_s)
            line = raw.decode("utf-8", errors="replace").strip()
            sample = parse_stream_line(line, self.pattern, self.source, self.quantity)
            if sample is not None:
                return self.stamped(sample)
            skipped.append(line)
        last = skipped[-1] if skipped else ""
        raise MeterGarbage(
            f"{len(skipped)} lines in a row did not match the stream regex (last: {last!r});"
            " check stream_regex in the meter settings"
        )

    def close(self) -> None:
        """Release the transport."""
        self.transport.close()
