"""A meter or logger that prints readings as text lines on its own.

Its dial is in a person's hand, so the kind of each reading is read from the line: the unit
and the marking after it (``modes.unit_marking``: ``V`` or ``V DC`` DC volts, ``VAC``/``V~``
AC volts, ``mA``/``µA`` current, ``V DIODE``/``V ->|`` diode test, ``Vpp`` peak to peak).
A line with no unit is of the kind the tool asked for. Where a meter marks nothing (every
line just ``V``), the settings state its kind (``stream_kind``) and the line's unit only
scales the value. A sample in the mode of the kind asked for is of that kind, with its
conditions (DC volts while ``dc-loaded`` is asked for is a reading under the test load);
in another mode it is that mode's plain kind, and the caller sees that the dial is elsewhere.
"""

from __future__ import annotations

import re

from fieldtool.core.measurement import QUANTITIES, Measurement, Quantity, Source
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterGarbage, WrongMode
from fieldtool.meters.modes import UnknownMarking, mode_of, plain_kind, unit_marking
from fieldtool.meters.parse import UNIT_NAMES, stream_fields
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.transport import Transport

MAX_SKIPPED_LINES = 20


def stream_sample(
    line: str,
    pattern: str | re.Pattern[str],
    source: Source,
    asked: Quantity,
    conditions: tuple[tuple[str, float], ...] = (),
    stated: Quantity | None = None,
) -> Measurement | None:
    """One streamed line as a sample (see the module docstring); None when it does not match.

    Args:
        asked: the kind the tool asked for (its ``conditions`` go on a sample of that kind).
        stated: the kind the settings say every line is, or None to read it from the unit.

    Raises:
        MeterGarbage: the value, the unit or its marking cannot be understood.
        WrongMode: the line is of a mode no kind is read in (AC current).
    """
    fields = stream_fields(line, pattern)
    if fields is None:
        return None
    value, unit = fields
    try:
        marking = unit_marking(unit)
    except UnknownMarking as exc:
        raise MeterGarbage(f"streamed line {line!r}: {exc}") from None
    scale = 1.0 if marking is None else marking[0]
    if stated is not None:
        mode = mode_of(stated)
        if marking is not None and marking[1].unit != mode.unit:
            what = UNIT_NAMES.get(mode.unit, mode.unit)
            raise MeterGarbage(
                f"streamed unit {unit!r} in line {line!r} is not a {what} unit, and the meter "
                f"settings say it shows {stated.words} (stream_kind)"
            )
    else:
        mode = mode_of(asked) if marking is None else marking[1]
    if asked.name in mode.kinds:
        kind, conditions = asked, conditions
    else:
        plain = plain_kind(mode)
        if plain is None:
            raise WrongMode(
                f"the meter shows {mode.name}, which fieldtool does not read; "
                f"turn it to {mode_of(asked).name} for {asked.words}"
            )
        kind, conditions = plain, ()
    number = None if value is None else value * scale
    return Measurement(None, kind, number, source, conditions=conditions)


class StreamMeter(Meter):
    """Read the next fresh line from a streaming meter; its kind comes from its unit."""

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
        kind = self.settings.stream_kind
        self.stated = None if kind == "auto" else QUANTITIES[kind]
        if self.stated is None:
            self.quantities = frozenset(QUANTITIES)
        else:
            self.quantities = frozenset(mode_of(self.stated).kinds)
            self.quantity = QUANTITIES[mode_of(self.stated).kinds[0]]

    def connect(self) -> None:
        """Streaming meters have no identity to ask for; nothing to do."""
        return None

    def read(self) -> Measurement:
        """The sample of the next line that arrives after this call."""
        self.transport.discard_stale()
        skipped: list[str] = []
        while len(skipped) <= self.max_skipped:
            raw = self.transport.readline(self.settings.timeout_s)
            line = raw.decode("utf-8", errors="replace").strip()
            sample = stream_sample(
                line, self.pattern, self.source, self.quantity, self.conditions, self.stated
            )
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
