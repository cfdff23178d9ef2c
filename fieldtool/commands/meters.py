"""``fieldtool ports``, ``read`` and ``sim-meter``: list ports, take a reading, practise."""

from __future__ import annotations

import argparse
import json
import random
import signal
import sys

from fieldtool.commands.boards import PROFILE_HELP, profile_arg
from fieldtool.commands.options import SEED, number, whole
from fieldtool.core.diagnosis.faults import describe, parse_fault
from fieldtool.core.errors import InputError, shown
from fieldtool.core.measurement import DC, QUANTITIES, Quantity, quantity
from fieldtool.core.units import parse_si
from fieldtool.meters.connect import open_serial_meter
from fieldtool.meters.errors import WrongMode
from fieldtool.meters.modes import mode_of
from fieldtool.meters.settings import (
    BAUD_RATES,
    COMMAND_DELAY_S,
    PROTOCOLS,
    MeterSettings,
    load_settings,
    with_overrides,
)
from fieldtool.meters.settle import settle
from fieldtool.meters.sim_pty import PtyMeter
from fieldtool.meters.simulated import SimulatedMeter, random_fault

BAUD = whole(*BAUD_RATES, "baud", "from teleprinter rates to fast USB-serial adapters")


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``ports`` and ``read`` subcommands."""
    ports = subparsers.add_parser(
        "ports",
        help="list serial ports a meter may be on",
        description="List the serial ports this computer has (USB-serial adapters included), "
        "with each one's description and USB vid:pid, so you can tell which one is the meter: "
        "unplug it, list again, and see which line went. Give that device to --port.",
    )
    ports.add_argument("--json", action="store_true", help="print JSON")
    ports.set_defaults(handler=run_ports)

    read = subparsers.add_parser(
        "read",
        help="take one reading from a meter",
        description="Take one reading from a meter on a serial port (DC volts unless --kind "
        "names another) and print it "
        "(OL when over range), to check the connection and settings before probing. With "
        "--settle it waits until a few readings in a row agree, as the probing screen does.",
    )
    read.add_argument(
        "--port",
        required=True,
        help="the meter's port: a device such as /dev/ttyUSB0 (see 'fieldtool ports') or a URL "
        "such as socket://HOST:PORT",
    )
    read.add_argument("--protocol", choices=PROTOCOLS)
    read.add_argument("--baud", type=BAUD, help="serial speed (default 9600, or the settings')")
    read.add_argument("--settings", help="meter settings TOML file")
    read.add_argument("--settle", action="store_true", help="wait for the reading to settle")
    read.add_argument(
        "--kind",
        default=DC.name,
        help=f"what to measure: {', '.join(QUANTITIES)} (default dc); a SCPI meter is set up"
        " for it, a streaming meter's line says which it shows",
    )
    read.add_argument(
        "--test-load",
        metavar="OHMS",
        help="the test load clipped from the output to ground, for --kind dc-loaded (e.g. 47k)",
    )
    read.add_argument("--json", action="store_true", help="print JSON")
    read.set_defaults(handler=run_read)

    sim = subparsers.add_parser(
        "sim-meter",
        help="a simulated meter on a pseudo-terminal, for practice without hardware",
        description=(
            "Serve a simulated meter on a new pseudo-terminal: connect 'fieldtool read' or the"
            " app to the path it prints, and type node names here to move the probe."
        ),
    )
    sim.add_argument("profile", help=PROFILE_HELP)
    sim.add_argument(
        "--fault", help="fault spec such as D5:open or C3:lowcap=0.3; 'random' picks one"
    )
    sim.add_argument("--hidden", action="store_true", help="keep the fault off the screen")
    sim.add_argument(
        "--protocol",
        choices=PROTOCOLS,
        default="scpi",
        help="answer SCPI queries (default) or print a reading line four times a second",
    )
    sim.add_argument(
        "--seed", type=SEED, help="noise (and random fault) seed; a new one each run by default"
    )
    sim.add_argument(
        "--command-gap",
        type=number(COMMAND_DELAY_S, "command gap"),
        default=0.0,
        metavar="SECONDS",
        help="act as a slow meter that loses commands sent sooner than this after the last",
    )
    sim.set_defaults(handler=run_sim_meter)


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


def _kind(args: argparse.Namespace) -> tuple[Quantity, tuple[tuple[str, float], ...]]:
    """The kind asked for with --kind and its conditions (--test-load)."""
    kind = quantity(args.kind)
    if kind.conditions and args.test_load is None:
        raise InputError(f"--kind {kind.name} needs --test-load OHMS (the load clipped on)")
    if not kind.conditions and args.test_load is not None:
        raise InputError(f"--test-load goes with --kind dc-loaded, not --kind {kind.name}")
    if not kind.conditions:
        return kind, ()
    try:
        ohms = parse_si(args.test_load)
    except ValueError:
        raise InputError(
            f"--test-load {shown(args.test_load)}: expected ohms such as 47k"
        ) from None
    if not ohms > 0:
        raise InputError(f"--test-load {shown(args.test_load)}: a resistance above 0 ohms")
    return kind, (("test_load_ohms", ohms),)


def run_read(args: argparse.Namespace) -> int:
    """Take one (optionally settled) reading of the kind asked for and print it."""
    kind, conditions = _kind(args)
    base = load_settings(args.settings) if args.settings else MeterSettings()
    settings = with_overrides(base, protocol=args.protocol, baud=args.baud)
    meter = open_serial_meter(args.port, settings)
    try:
        meter.connect()
        meter.set_quantity(kind, conditions)
        reading = settle(meter.read, settings.settle) if args.settle else meter.read()
    finally:
        meter.close()
    if reading.quantity != kind:
        raise WrongMode(
            f"the meter shows {reading.quantity.words}, not {kind.words}: turn its dial to "
            f"{mode_of(kind).name}, or ask for --kind {reading.quantity.name}"
        )
    out = {
        "kind": reading.quantity.name,
        "value": reading.value,
        "unit": reading.unit,
        "volts": reading.value if reading.unit == "V" else None,
        "overload": reading.overload,
        "spread": reading.spread,
        "count": reading.samples,
        "meter": meter.identity,
    }
    if reading.conditions:
        out["conditions"] = dict(reading.conditions)
    if args.settle:
        out["settled"] = reading.settled
    if args.json:
        print(json.dumps(out))
    elif reading.overload:
        print("OL (overload)")
    else:
        print(f"{reading.value:.6g} {reading.unit}")
    return 0


def _chosen_fault(args: argparse.Namespace, profile, seed: int):
    """The fault asked for on the command line (None: healthy)."""
    if args.fault is None:
        return None
    if args.fault.strip().lower() == "random":
        return random_fault(profile, seed)
    return parse_fault(args.fault, profile)


def run_sim_meter(args: argparse.Namespace) -> int:
    """Serve a simulated meter on a pty until quit, end of input or Ctrl-C."""
    # Ctrl-C is how sim-meter stops; a shell that starts it in the background hands it an
    # ignored SIGINT, so ask for the usual KeyboardInterrupt back.
    signal.signal(signal.SIGINT, signal.default_int_handler)
    profile = profile_arg(args.profile)
    seed = args.seed if args.seed is not None else random.SystemRandom().randrange(1_000_000)
    fault = _chosen_fault(args, profile, seed)
    meter = SimulatedMeter(profile, fault, seed=seed)
    server = PtyMeter(meter, args.protocol, say=_say, command_gap_s=args.command_gap)
    try:
        _say(server.port)
        shown = (
            "fault hidden" if args.hidden else f"fault: {_fault_words(fault, profile)}, seed {seed}"
        )
        _say(f"simulated {args.protocol.upper()} meter on {profile.name}, {shown}")
        _say("solving the board...")
        meter.connect()
        extra = " --protocol stream" if args.protocol == "stream" else ""
        _say(f"ready; connect with: fieldtool read --port {server.port}{extra} --settle")
        _say(
            "other kinds: --kind ac-rms, current (probe on 'supply'), diode-test (after "
            "'power off', probe on a diode), dc-loaded --test-load 47k (after 'load 47k')"
        )
        server.console("nodes")
        _say(server.where())
        server.serve(sys.stdin.fileno())
    except KeyboardInterrupt:
        if sys.stdout.isatty():
            print()  # Ctrl-C is the normal way to stop; end the line the terminal's ^C began
    finally:
        server.close()
    if args.hidden:
        _say(f"the fault was: {_fault_words(fault, profile)} (seed {seed})")
    _say("sim-meter stopped")
    return 0


def _fault_words(fault, profile) -> str:
    """A fault in plain words with its spec, or 'none (healthy board)'."""
    if fault is None:
        return "none (healthy board)"
    return f"{describe(fault, profile)} ({fault.spec(profile)})"


def _say(text: str) -> None:
    """One line on the sim-meter's console, shown at once."""
    print(text, flush=True)
