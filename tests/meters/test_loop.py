"""The meter reading loop over real pseudo-terminal pairs with pyserial, and the simulated meter.

The test plays a SCPI meter on the master side of a pty; the loop opens the slave side by its
path as it would a USB adapter, and tells a listener what happens.
"""

from __future__ import annotations

import os
import threading
import time
from functools import partial

import pytest

from fieldtool.core.measurement import Measurement, Source
from fieldtool.meters.connect import open_serial_meter
from fieldtool.meters.errors import MeterDisconnected, MeterTimeout, PortMissing
from fieldtool.meters.loop import MeterListener, MeterLoop
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.simulated import SimulatedMeter
from tests.meters.conftest import accuracy
from tests.pty_lines import pty_lines

IDENTITY = "ACME,DMM-7,31,2.0"
NO_ERROR = '0,"No error"'  # SCPI's empty error queue


class Heard(MeterListener):
    """Writes down what the loop tells, in order, and lets a test wait for it."""

    def __init__(self) -> None:
        self.calls: list[tuple[str, object]] = []
        self.changed = threading.Condition()

    def _note(self, what: str, value: object) -> None:
        with self.changed:
            self.calls.append((what, value))
            self.changed.notify_all()

    def connected(self, source: Source) -> None:
        self._note("connected", source)

    def received(self, sample: Measurement) -> None:
        self._note("received", sample)

    def failed(self, error) -> None:
        self._note("failed", error)

    def lost(self, error) -> None:
        self._note("lost", error)

    def of(self, what: str) -> list:
        with self.changed:
            return [v for w, v in self.calls if w == what]

    def wait(self, test, what: str, timeout: float = 10.0) -> None:
        deadline = time.monotonic() + timeout
        with self.changed:
            while not test():
                left = deadline - time.monotonic()
                if left <= 0:
                    raise AssertionError(f"timed out waiting for {what}: heard {self.calls}")
                self.changed.wait(left)


class PtyMeterSide:
    """Plays a SCPI meter on the master fd; ``mute`` stops answers, ``unplug`` hangs up."""

    def __init__(self, master: int, volts: str = "+1.25000E+01") -> None:
        self.master = master
        self.volts = volts
        self.mute = threading.Event()
        self.unplug = threading.Event()
        self.heard: list[str] = []
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self) -> None:
        for command in pty_lines(self.master):
            self.heard.append(command)
            if self.unplug.is_set():
                os.close(self.master)  # the cable is pulled with a request unanswered
                return
            if self.mute.is_set():
                continue
            reply = {"*IDN?": IDENTITY, "SYST:ERR?": NO_ERROR, "READ?": self.volts}.get(command)
            if reply is not None:
                try:
                    os.write(self.master, (reply + "\n").encode())
                except OSError:
                    return


@pytest.fixture
def pty_meter():
    master, slave = os.openpty()
    side = PtyMeterSide(master)
    yield os.ttyname(slave), side
    side.unplug.set()
    side.thread.join(5)
    os.close(slave)


def run(loop: MeterLoop) -> threading.Thread:
    return loop.start()


def test_connects_reads_places_and_stops(pty_meter):
    port, side = pty_meter
    heard = Heard()
    settings = MeterSettings(timeout_s=0.5)
    loop = MeterLoop(partial(open_serial_meter, port, settings), heard, pause_s=0.01)
    loop.place_probe("S3")
    thread = run(loop)
    heard.wait(lambda: len(heard.of("received")) >= 2, "two samples")
    assert heard.calls[0] == ("connected", Source("meter", IDENTITY))
    sample = heard.of("received")[0]
    assert (sample.at, sample.value, sample.source, sample.settled) == (
        "S3",
        12.5,
        Source("meter", IDENTITY),
        False,
    )
    assert sample.taken is not None and sample.taken.endswith("Z")
    loop.place_probe("S4")
    count = len(heard.of("received"))
    heard.wait(lambda: len(heard.of("received")) >= count + 2, "samples at S4")
    assert heard.of("received")[-1].at == "S4"
    loop.stop()
    thread.join(5)
    assert not thread.is_alive() and loop.stopped
    told = len(heard.calls)
    time.sleep(0.1)
    assert len(heard.calls) == told  # nothing is told once stopped
    assert side.heard[:4] == ["*IDN?", "*CLS", "CONF:VOLT:DC", "SYST:ERR?"]
    assert heard.of("lost") == [] and heard.of("failed") == []


def test_a_silent_meter_is_retried_not_lost(pty_meter):
    port, side = pty_meter
    heard = Heard()
    settings = MeterSettings(timeout_s=0.3)
    loop = MeterLoop(partial(open_serial_meter, port, settings), heard, pause_s=0.01)
    thread = run(loop)
    heard.wait(lambda: heard.of("received"), "a first sample")
    side.mute.set()
    heard.wait(lambda: len(heard.of("failed")) >= 2, "two timeouts")
    assert all(isinstance(e, MeterTimeout) for e in heard.of("failed"))
    side.mute.clear()
    count = len(heard.of("received"))
    heard.wait(lambda: len(heard.of("received")) > count, "readings again")
    assert heard.of("lost") == [] and thread.is_alive()
    loop.stop()
    thread.join(5)


def test_a_meter_that_hangs_up_is_lost_and_the_loop_ends(pty_meter):
    port, side = pty_meter
    heard = Heard()
    loop = MeterLoop(partial(open_serial_meter, port, MeterSettings(timeout_s=0.5)), heard)
    loop.pause_s = 0.01
    thread = run(loop)
    heard.wait(lambda: heard.of("received"), "a first sample")
    side.unplug.set()
    heard.wait(lambda: heard.of("lost"), "the meter lost", timeout=15)
    thread.join(5)
    assert not thread.is_alive()
    (error,) = heard.of("lost")
    assert isinstance(error, MeterDisconnected) and heard.calls[-1] == ("lost", error)


def test_a_port_that_is_not_there_is_lost_at_once(tmp_path):
    heard = Heard()
    missing = str(tmp_path / "ttyUSB9")
    loop = MeterLoop(partial(open_serial_meter, missing, MeterSettings()), heard)
    loop.run()  # in this thread: it returns once it has told
    assert [w for w, _ in heard.calls] == ["lost"]
    assert isinstance(heard.of("lost")[0], PortMissing)


def test_the_simulated_meter_has_its_probe_placed(board, healthy):
    """The one meter whose probe the tool places (``places_probe``); once the node has
    settled (a few readings) the samples read there follow the core's expectation within
    the meter's accuracy."""
    meter = SimulatedMeter(board, seed=3, reading_interval_s=0.05, meter_tau_s=0.0)
    heard = Heard()
    loop = MeterLoop(lambda: meter, heard, pause_s=0.0)
    loop.place_probe("S4")
    thread = run(loop)
    heard.wait(lambda: len(heard.of("received")) >= 10, "samples", timeout=60)
    assert meter.probe == "S4"
    last = heard.of("received")[-1]
    expected = healthy.node("S4").volts
    assert last.at == "S4" and abs(last.value - expected) <= accuracy(board, expected)
    loop.place_probe("TP3")  # a test-point label
    heard.wait(lambda: meter.probe == "S2" and heard.of("received")[-1].at == "TP3", "moved")
    loop.stop()
    thread.join(5)
    assert heard.calls[0] == ("connected", Source("simulated", meter.identity))
