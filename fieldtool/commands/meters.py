"""``fieldtool ports`` and ``fieldtool read``: list serial ports and take one meter reading."""

from __future__ import annotations

import argparse
import json

from fieldtool.meters.scpi import ScpiMeter
from fieldtool.meters.settings import MeterSettings, load_settings, with_overrides
from fieldtool.meters.settle import settle
from fieldtool.meters.stream import StreamMeter
from fieldtool.meters.transport import open_port


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``ports`` and ``read`` subcommands."""
    ports = subparsers.add_parser("ports", help="list serial ports a meter may be on")
    ports.add_argument("--json", action="store_true", help="print JSON")
    ports.set_defaults(handler=run_ports)

    read = subparsers.add_parser("read", help="take one reading from a meter")
    read.add_argument("--port", required=True, help="device path or pyserial URL")
    read.add_argument("--protocol", choices=("scpi", "stream"))
    read.add_argument("--baud", type=int)
    read.add_argument("--settings", help="meter settings TOML file")
    read.add_argument("--settle", action="store_true", help="wait for the reading to settle")
    read.add_argument("--json", action="store_true", help="print JSON")
    read.set_defaults(handler=run_read)


def list_ports() -> list[dict]:
    """The serial ports pyserial can see, as plain dictionaries."""
    from serial.tools import list_ports as lp

    rows = []
    for info in sorted(lp.comports(), key=lambda p: p.device):
        usb = f"{info.vid:04x}:{info.pid:04x}" if info.vid is not None else None
        rows.append(
            {
                "device": info.device,
                "description": info.description,
                "usb": usb,
                "serial_number": info.serial_number,
            }
        )
    return rows


def run_ports(args: argparse.Namespace) -> int:
    """Print the serial ports."""
    rows = list_ports()
    if args.json:
        print(json.dumps(rows))
        return 0
    if not rows:
        print("no serial ports found")
    for row in rows:
        extra = f" [{row['usb']}]" if row["usb"] else ""
        print(f"{row['device']}  {row['description']}{extra}")
    return 0


def run_read(args: argparse.Namespace) -> int:
    """Take one (optionally settled) reading and print it."""
    base = load_settings(args.settings) if args.settings else MeterSettings()
    settings = with_overrides(base, protocol=args.protocol, baud=args.baud)
    terminator = settings.terminator.encode("ascii")
    transport = open_port(args.port, settings.baud, settings.timeout_s, terminator)
    try:
        meter_cls = ScpiMeter if settings.protocol == "scpi" else StreamMeter
        meter = meter_cls(transport, settings)
        meter.connect()
        if args.settle:
            result = settle(meter.read, settings.settle)
            out = {
                "volts": result.volts,
                "overload": result.overload,
                "spread": result.spread,
                "count": result.count,
                "settled": result.settled,
            }
        else:
            reading = meter.read()
            out = {"volts": reading.volts, "overload": reading.overload, "spread": None}
            out["count"] = 1
        out["meter"] = meter.identity
    finally:
        transport.close()
    if args.json:
        print(json.dumps(out))
    elif out["overload"]:
        print("OL (overload)")
    else:
        print(f"{out['volts']:.6g} V")
    return 0
