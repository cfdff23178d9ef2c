"""A simulated meter served on a pseudo-terminal, so the whole serial path runs without hardware.

The far end of the pty behaves as a SCPI meter (answers ``*IDN?``, the set-up of every kind,
``CONF:VOLT:DC``, ``CONF:VOLT:AC``, ``CONF:CURR:DC``, ``CONF:DIOD`` and ``CONF:VOLT:PTP``, and
their ``MEAS:...?`` forms, ``READ?``, ``SYST:ERR?``; unknown commands go to the SCPI error
queue) or as a streaming meter (a "value unit" line at a fixed rate, its unit marked with the
mode: ``V``, ``V AC``, ``uA``, ``V DIODE``, ``mV pp``). The person running it says on the
console where the probe is (a node, a rail or a diode), switches the board (``power off``,
``power on``), clips a test load on (``load 47k``, ``load off``) and, for a streaming meter,
turns the dial (``dc``, ``ac-rms``, ``current``, ``diode-test``, ``ripple-pp``).
"""

from __future__ import annotations

import os
import re
import selectors
import time
import tty
from collections import deque
from collections.abc import Callable
from functools import partial

from fieldtool.core.errors import InputError
from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DIODE_TEST,
    RIPPLE_PP,
    Measurement,
    Quantity,
)
from fieldtool.core.units import parse_si
from fieldtool.meters.errors import UnknownNode
from fieldtool.meters.modes import AC_VOLTS, DIODE, PEAK_TO_PEAK, mode_of
from fieldtool.meters.simulated import SimulatedMeter

# SCPI-99 error numbers (SCPI Consortium, SCPI 1999.0 Vol. 2, ch. 21; from memory).
NO_ERROR = '0,"No error"'
UNDEFINED_HEADER = '-113,"Undefined header"'
DATA_STALE = '-230,"Data corrupt or stale"'
QUEUE_OVERFLOW = '-350,"Queue overflow"'
INPUT_OVERRUN = '-363,"Input buffer overrun"'
INPUT_BUFFER_BYTES = 1024
ERROR_QUEUE_SIZE = 10
SCPI_OVERLOAD = "+9.90000000E+37"

_SHORT = {
    "CONFIGURE": "CONF",
    "VOLTAGE": "VOLT",
    "MEASURE": "MEAS",
    "SYSTEM": "SYST",
    "ERROR": "ERR",
    "FETCH": "FETC",
    "INITIATE": "INIT",
    "REMOTE": "REM",
    "LOCAL": "LOC",
    "CURRENT": "CURR",
    "DIODE": "DIOD",
    "PTPEAK": "PTP",
}
# The kind each SCPI function selects (the set-up commands of ``modes``).
SCPI_FUNCTIONS: dict[str, Quantity] = {
    "VOLT:DC": DC,
    "VOLT:AC": AC_RMS,
    "CURR:DC": CURRENT,
    "DIOD": DIODE_TEST,
    "VOLT:PTP": RIPPLE_PP,
}
DIAL_WORDS: dict[str, Quantity] = {q.name: q for q in (DC, AC_RMS, CURRENT, DIODE_TEST, RIPPLE_PP)}
_LIFT_WORDS = {"lift", "off", "none", "-"}
_QUIT_WORDS = {"quit", "exit", "q"}
_HELP_WORDS = {"help", "?", "nodes"}


def canonical_header(command: str) -> str:
    """A SCPI command's header in short form without parameters or optional parts.

    ``:MEASure:VOLTage? AUTO`` → ``MEAS:VOLT:DC?``; ``SYSTem:ERRor:NEXT?`` → ``SYST:ERR?``.
    """
    header = command.strip().split(maxsplit=1)[0].upper().lstrip(":") if command.strip() else ""
    query = header.endswith("?")
    parts = [_SHORT.get(p, p) for p in header.rstrip("?").split(":")]
    if parts[0] in ("CONF", "MEAS") and parts[1:] in (["VOLT"], ["CURR"]):
        parts.append("DC")
    if parts == ["SYST", "ERR", "NEXT"]:
        parts = ["SYST", "ERR"]
    return ":".join(parts) + ("?" if query else "")


def scpi_number(sample: Measurement) -> str:
    """A sample as an IEEE 488.2 NR3 number; overload as the SCPI +9.9E37."""
    if sample.value is None:
        return SCPI_OVERLOAD
    return f"{sample.value:+.8E}"


_MARKS = {AC_VOLTS.name: " AC", DIODE.name: " DIODE", PEAK_TO_PEAK.name: " pp"}


def stream_text(sample: Measurement) -> str:
    """A sample as a 5-digit meter's logging line, the unit marked with the mode:
    ``125.77 V``, ``12.345 mV``, ``6.985 V AC``, ``280.40 uA``, ``0.5808 V DIODE``,
    ``6.5090 mV pp``; ``OL`` (with the unit where it is not DC volts)."""
    mark = _MARKS.get(mode_of(sample.quantity).name, "")
    if sample.value is None:
        return "OL" if sample.quantity.unit == "V" and not mark else f"OL {sample.unit}{mark}"
    value, unit = sample.value, sample.unit
    for prefix in ("m", "u"):
        if abs(value) >= 1.0 or value == 0.0 or sample.unit == "V" and prefix == "u":
            break
        value, unit = value * 1000.0, prefix + sample.unit
    digits = max(0, 5 - len(str(int(abs(value)))))
    return f"{value:.{digits}f} {unit}{mark}"


class ScpiResponder:
    """Answer SCPI command lines from a simulated meter, keeping the SCPI error queue."""

    def __init__(self, meter: SimulatedMeter) -> None:
        self.meter = meter
        self.errors: deque[str] = deque()
        self.last: Measurement | None = None

    def error(self, entry: str) -> None:
        """Queue an SCPI error; a full queue ends in a queue-overflow entry."""
        if len(self.errors) >= ERROR_QUEUE_SIZE:
            self.errors[-1] = QUEUE_OVERFLOW
        else:
            self.errors.append(entry)

    def _measure(self) -> str:
        self.last = self.meter.read()
        return scpi_number(self.last)

    def _configure(self, quantity: Quantity) -> None:
        """Turn the meter to ``quantity`` (DC volts under a clipped test load stays DC)."""
        self.meter.set_quantity(quantity)

    def _measure_as(self, quantity: Quantity) -> str:
        self._configure(quantity)
        return self._measure()

    def _fetch(self) -> str | None:
        if self.last is None:
            self.error(DATA_STALE)
            return None
        return scpi_number(self.last)

    def _initiate(self) -> None:
        self.last = self.meter.read()

    def _reset(self) -> None:
        self.last = None

    def _next_error(self) -> str:
        return self.errors.popleft() if self.errors else NO_ERROR

    def handle(self, line: str) -> str | None:
        """The answer to one line (commands joined by ``;`` allowed), or None if it has none."""
        answers = []
        for command in line.split(";"):
            if not command.strip():
                continue
            answer = self._one(canonical_header(command))
            if answer is not None:
                answers.append(answer)
        return ";".join(answers) if answers else None

    def _one(self, header: str) -> str | None:
        table: dict[str, Callable[[], str | None]] = {
            "*IDN?": lambda: self.meter.identity,
            "*OPC?": lambda: "1",
            "*RST": self._reset,
            "*CLS": self.errors.clear,
            "READ?": self._measure,
            "INIT": self._initiate,
            "FETC?": self._fetch,
            "SYST:ERR?": self._next_error,
            "SYST:REM": lambda: None,
            "SYST:LOC": lambda: None,
        }
        for function, quantity in SCPI_FUNCTIONS.items():
            table[f"CONF:{function}"] = partial(self._configure, quantity)
            table[f"MEAS:{function}?"] = partial(self._measure_as, quantity)
        action = table.get(header)
        if action is None:
            self.error(UNDEFINED_HEADER)
            return None
        return action()


class PtyMeter:
    """Serve a simulated meter on a new pseudo-terminal; the console says where the probe is."""

    def __init__(
        self,
        meter: SimulatedMeter,
        protocol: str = "scpi",
        say: Callable[[str], None] = print,
        command_gap_s: float = 0.0,
    ) -> None:
        self.meter = meter
        self.protocol = protocol
        self.say = say
        self.command_gap_s = command_gap_s
        self.responder = ScpiResponder(meter)
        self.master, self._slave = os.openpty()
        tty.setraw(self._slave)  # no echo, no line editing: bytes pass as a serial line's would
        os.set_blocking(self.master, False)
        self.port = os.ttyname(self._slave)
        self.running = True
        self._from_port = b""
        self._from_console = b""
        self._skipping = False
        self._last_command: float | None = None

    # -- the console ----------------------------------------------------------------------

    def where(self) -> str:
        """Where the probe is, in words."""
        node = self.meter.probe
        return "probe lifted" if node is None else f"probe on {self.meter.describe_node(node)}"

    def board_state(self) -> str:
        """The meter's mode and the board's state, in words."""
        m = self.meter
        load = f", test load {m.test_load_ohms:g} Ω clipped on" if m.test_load_ohms else ""
        power = "board powered" if m.powered else "board off and discharged"
        return f"meter on {mode_of(m.quantity).name}, {power}{load}"

    def console(self, line: str) -> None:
        """Act on one console line: a place, ``lift``, a dial position, ``power on|off``,
        ``load OHMS|off``, ``status``, ``nodes`` or ``quit``."""
        word = line.strip()
        words = word.lower().split()
        if not word:
            self.say(self.where())
        elif word.lower() in _QUIT_WORDS:
            self.running = False
        elif word.lower() in _HELP_WORDS:
            self.say(self.meter.places())
            self.say(
                "type a place to move the probe, 'lift', 'power off' / 'power on', "
                "'load 47k' / 'load off', a dial position (" + ", ".join(DIAL_WORDS) + "), "
                "'status' or 'quit'"
            )
        elif word.lower() in _LIFT_WORDS:
            self.meter.place_probe(None)
            self.say(self.where())
        elif word.lower() == "status":
            self.say(f"{self.where()}; {self.board_state()}")
        elif word.lower() in DIAL_WORDS:
            self.meter.set_quantity(DIAL_WORDS[word.lower()])
            self.say(self.board_state())
        elif words[0] == "power" and words[1:] in (["on"], ["off"]):
            self.meter.set_board(words[1] == "on", self.meter.test_load_ohms)
            self.say(self.board_state())
        elif words[0] == "load" and len(words) == 2:
            self._clip(word.split()[1])
        else:
            try:
                self.meter.place_probe(word)
            except UnknownNode as exc:
                self.say(exc.message)
                return
            self.say(self.where())

    def _clip(self, value: str) -> None:
        """Clip a test load of ``value`` ohms from the output to ground, or take it off."""
        if value in ("off", "none", "-"):
            ohms = None
        else:
            try:
                ohms = parse_si(value)
            except ValueError:
                self.say(f"'{value}' is not a resistance; type e.g. 'load 47k' or 'load off'")
                return
            if not ohms > 0:
                self.say("a test load needs a resistance above 0; type e.g. 'load 47k'")
                return
        self.say("solving the board with the test load..." if ohms else "test load off")
        self.meter.set_board(self.meter.powered, ohms)
        self.say(self.board_state())

    # -- the serial side ------------------------------------------------------------------

    def send(self, text: str) -> None:
        """Write to the port; bytes nobody reads are lost, as on a real line."""
        data = text.encode("ascii", errors="replace")
        while data:
            try:
                written = os.write(self.master, data)
            except (BlockingIOError, OSError):
                return
            data = data[written:]

    def command(self, line: str) -> None:
        """Answer one SCPI line from the port; a slow meter loses commands sent too soon."""
        now = time.monotonic()
        last, self._last_command = self._last_command, now
        if self.command_gap_s > 0 and last is not None and now - last < self.command_gap_s:
            self.say(f"lost command {line!r}: it came {now - last:.3f} s after the previous one")
            return
        answer = self.responder.handle(line)
        if answer is not None:
            self.send(answer + "\n")

    @staticmethod
    def _lines(buffer: bytes) -> tuple[list[str], bytes]:
        """Complete lines in ``buffer`` (any of CR, LF, CR LF) and the unfinished rest."""
        *done, rest = re.split(rb"\r\n|\r|\n", buffer)
        return [d.decode("utf-8", errors="replace") for d in done], rest

    def _port_input(self) -> None:
        try:
            chunk = os.read(self.master, 4096)
        except (BlockingIOError, OSError):
            return
        if self.protocol != "scpi":
            return  # a streaming meter ignores what it is sent
        lines, rest = self._lines(self._from_port + chunk)
        if len(rest) > INPUT_BUFFER_BYTES:  # a line that does not end: drop it up to its end
            rest, self._skipping = b"", True
            self.responder.error(INPUT_OVERRUN)
        self._from_port = rest
        for line in lines:
            if self._skipping:
                self._skipping = False  # the tail of the overrun line
            elif len(line) > INPUT_BUFFER_BYTES:
                self.responder.error(INPUT_OVERRUN)
            elif line.strip():
                self.command(line)

    def _console_input(self, fd: int) -> None:
        chunk = os.read(fd, 1024)
        if not chunk:
            self.running = False  # console closed (Ctrl-D or end of piped input)
            return
        lines, self._from_console = self._lines(self._from_console + chunk)
        for line in lines:
            self.console(line)
            if not self.running:
                return

    def serve(self, console_fd: int) -> None:
        """Answer the port and the console until ``quit``, end of console input or Ctrl-C."""
        with selectors.DefaultSelector() as sel:
            try:
                sel.register(
                    console_fd, selectors.EVENT_READ, lambda: self._console_input(console_fd)
                )
            except PermissionError:  # a regular file or device cannot be waited on
                raise InputError(
                    "sim-meter takes probe moves from a terminal or a pipe, not a file; "
                    "run it in a terminal, or pipe the node names in (e.g. cat moves.txt | ...)"
                ) from None
            sel.register(self.master, selectors.EVENT_READ, self._port_input)
            interval = self.meter.reading_interval_s
            due = time.monotonic() + interval
            while self.running:
                timeout = max(0.0, due - time.monotonic()) if self.protocol == "stream" else None
                for key, _ in sel.select(timeout):
                    key.data()
                    if not self.running:
                        return
                now = time.monotonic()
                if self.protocol == "stream" and now >= due:
                    self.send(stream_text(self.meter.sample()) + "\r\n")
                    due = due + interval if due + interval > now else now + interval

    def close(self) -> None:
        """Close both ends of the pseudo-terminal."""
        for fd in (self.master, self._slave):
            try:
                os.close(fd)
            except OSError:
                pass  # already closed
