"""Open the meter a port and its settings describe (a meter protocol is chosen here)."""

from __future__ import annotations

from fieldtool.meters.base import Meter
from fieldtool.meters.scpi import ScpiMeter
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.stream import StreamMeter
from fieldtool.meters.transport import open_port

PROTOCOL_DRIVERS: dict[str, type[ScpiMeter] | type[StreamMeter]] = {
    "scpi": ScpiMeter,
    "stream": StreamMeter,
}


def open_serial_meter(port: str, settings: MeterSettings) -> Meter:
    """The driver for ``settings.protocol`` on an opened port (not connected yet).

    Raises:
        MeterConnectionError: the port is missing or busy.
        MeterSetupError: no permission, or a name pyserial cannot open.
    """
    terminator = settings.terminator.encode("ascii")
    transport = open_port(port, settings.baud, settings.timeout_s, terminator)
    return PROTOCOL_DRIVERS[settings.protocol](transport, settings)
