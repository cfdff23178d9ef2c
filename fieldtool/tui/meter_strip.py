"""The meter strip: live value, settling, a sparkline, and the meter's worker thread.

The strip owns the meter connection. A thread worker opens the port (``open_port``), asks the
driver for readings in a loop with the driver's finite timeouts, tells a simulated meter where
the probe is, and hands each value back with ``call_from_thread``. The screen sets
``probe_node`` (attributes down); the strip posts ``Connected`` and ``Problem`` (messages up).
A lost meter stops the loop and keeps every reading already taken.
"""

from __future__ import annotations

import threading
from collections import deque
from dataclasses import dataclass, field

from textual import work
from textual.containers import Horizontal
from textual.content import Content
from textual.message import Message
from textual.reactive import reactive
from textual.widgets import Sparkline, Static
from textual.worker import Worker, WorkerState, get_current_worker

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis.faults import Fault
from fieldtool.core.errors import FieldtoolError
from fieldtool.meters.errors import MeterTimeout
from fieldtool.meters.parse import Reading
from fieldtool.meters.settings import MeterSettings, SettleRule
from fieldtool.meters.settle import _agree, _steady  # the settle rule's own judgement
from fieldtool.tui.view import volts_text

SPARK_POINTS = 40
POLL_S = 0.2  # pause between requests; the driver's own timeout bounds each read


@dataclass(frozen=True)
class MeterChoice:
    """Which meter the session reads: typed only, a serial port or URL, or the simulated one."""

    kind: str = "typed"  # "typed" | "port" | "simulated"
    port: str = ""
    settings: MeterSettings = field(default_factory=MeterSettings)
    fault: Fault | None = None  # simulated meter: the board's hidden fault
    seed: int = 0

    @property
    def words(self) -> str:
        """The choice in a few words for the title bar."""
        if self.kind == "port":
            return f"{self.settings.protocol} meter on {self.port}"
        if self.kind == "simulated":
            return "simulated meter"
        return "typed readings"


def open_meter(choice: MeterChoice, profile: Profile):
    """Open and return the meter driver for a choice (blocking: call it from a worker)."""
    if choice.kind == "simulated":
        from fieldtool.meters.simulated import SimulatedMeter

        return SimulatedMeter(profile, fault=choice.fault, seed=choice.seed)
    from fieldtool.meters.scpi import ScpiMeter
    from fieldtool.meters.stream import StreamMeter
    from fieldtool.meters.transport import open_port

    s = choice.settings
    transport = open_port(choice.port, s.baud, s.timeout_s, s.terminator.encode("ascii"))
    return (ScpiMeter if s.protocol == "scpi" else StreamMeter)(transport, s)


@dataclass(frozen=True)
class Settle:
    """Where the live value stands: the value, whether it settled, and its spread."""

    volts: float | None
    overload: bool
    settled: bool
    spread: float | None
    count: int


def settle_state(window: list[Reading], rule: SettleRule) -> Settle | None:
    """Judge the readings since the probe landed by the same rule ``meters.settle`` applies
    (None before any reading)."""
    if not window:
        return None
    last = window[-1]
    recent = window[-rule.count :]
    full = len(recent) == rule.count
    if full and all(r.overload for r in recent):
        return Settle(None, True, True, None, len(window))
    numbers = [r.volts for r in recent if r.volts is not None]
    earlier = [r.volts for r in window[-2 * rule.count : -rule.count] if r.volts is not None]
    spread = max(numbers) - min(numbers) if len(numbers) > 1 else None
    ok = full and len(numbers) == rule.count and _agree(numbers, rule)
    if ok and rule.trend:
        ok = _steady(earlier, numbers, rule)  # a slow creep is not settled
    return Settle(last.volts, last.overload, ok, spread, len(window))


class MeterStrip(Horizontal):
    """Live meter value, settling state and recent history; owns the meter worker."""

    probe_node: reactive[str | None] = reactive(None)
    status: reactive[str] = reactive("")

    class Connected(Message):
        """The meter answered; ``identity`` is what it said it is."""

        def __init__(self, identity: str) -> None:
            super().__init__()
            self.identity = identity

    class Problem(Message):
        """The meter failed; ``lost`` means the loop stopped (unplugged, port gone)."""

        def __init__(self, error: FieldtoolError, lost: bool) -> None:
            super().__init__()
            self.error = error
            self.lost = lost

    def __init__(self, choice: MeterChoice, profile: Profile, **kwargs) -> None:
        super().__init__(**kwargs)
        self.choice = choice
        self.profile = profile
        self.rule = choice.settings.settle
        self.window: list[Reading] = []
        self.history: deque[float] = deque(maxlen=SPARK_POINTS)
        self.identity = ""
        self.connected = False
        self._stop = threading.Event()

    def compose(self):
        """A text readout and a sparkline."""
        yield Static(id="meter-readout")
        yield Sparkline([], id="meter-spark")

    def on_mount(self) -> None:
        """Start reading unless the readings are typed."""
        self.border_title = "Meter"
        self.status = "type a reading: t or a digit" if self.choice.kind == "typed" else "opening"
        self._show()
        if self.choice.kind != "typed":
            self.start()

    def on_unmount(self) -> None:
        """Let the worker leave its loop."""
        self._stop.set()

    @property
    def live(self) -> bool:
        """True while a meter is connected and being read."""
        return self.connected

    @property
    def settle(self) -> Settle | None:
        """The current settle judgement for the node under the probe."""
        return settle_state(self.window, self.rule)

    def start(self) -> None:
        """(Re)connect the meter."""
        if self.choice.kind == "typed":
            return
        self._stop.clear()
        self.status = "connecting"
        self._run()

    def watch_probe_node(self) -> None:
        """The probe moved: the value must settle again."""
        self.window = []
        self._show()

    def watch_status(self) -> None:
        self._show()

    @work(thread=True, exclusive=True, group="meter", exit_on_error=False)
    def _run(self) -> None:
        worker = get_current_worker()
        try:
            driver = open_meter(self.choice, self.profile)
            identity = driver.connect() or getattr(driver, "identity", None) or self.choice.words
        except FieldtoolError as exc:
            self._hand_back(self._lost, exc, True)
            return
        self._hand_back(self._connected, str(identity))
        touched: object = object()
        try:
            while not (worker.is_cancelled or self._stop.is_set()):
                node = self.probe_node
                if node != touched and hasattr(driver, "touch"):
                    driver.touch(node)
                    touched = node
                try:
                    reading = driver.read()
                except MeterTimeout as exc:
                    self._hand_back(self._lost, exc, False)
                    continue
                except FieldtoolError as exc:
                    self._hand_back(self._lost, exc, True)
                    return
                self._hand_back(self._value, reading, node)
                self._stop.wait(POLL_S)
        finally:
            driver.close()

    def _hand_back(self, callback, *args) -> None:
        """Run ``callback`` on the UI thread unless the app is going away."""
        if self._stop.is_set():
            return
        try:
            self.app.call_from_thread(callback, *args)
        except RuntimeError:
            self._stop.set()  # the app has stopped; nothing to hand back to

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A meter loop that ended for any reason leaves no meter connected."""
        if event.worker.group == "meter" and event.state in (
            WorkerState.ERROR,
            WorkerState.SUCCESS,
        ):
            if event.worker.state == WorkerState.ERROR or not self._stop.is_set():
                self.connected = False
                if event.state == WorkerState.ERROR:
                    self.status = "no meter: it stopped unexpectedly (m reconnects)"
            self.app.refresh_bindings()

    def _connected(self, identity: str) -> None:
        self.identity = identity
        self.connected = True
        self.status = identity
        self.post_message(self.Connected(identity))

    def _lost(self, error: FieldtoolError, lost: bool) -> None:
        if lost:
            self.connected = False
            self.status = f"no meter: {error.title.lower()} (m reconnects)"
        self.post_message(self.Problem(error, lost))

    def _value(self, reading: Reading, node: str | None) -> None:
        if node != self.probe_node:
            return  # read before the probe moved
        self.window.append(reading)
        del self.window[: -max(self.rule.count * 4, 8)]
        if reading.volts is not None:
            self.history.append(reading.volts)
        self._show()

    def reset_window(self) -> None:
        """Forget the settle window (after a value was accepted)."""
        self.window = []
        self._show()

    def _show(self) -> None:
        if not self.is_mounted:
            return
        s = self.settle
        where = f"probe on {self.probe_node}" if self.probe_node else "probe lifted"
        if self.choice.kind == "typed":
            first = Content.assemble(("typed readings", "bold"), f" · {where}")
            keys = "type a value (t or a digit), Enter takes it"
        elif s is None:
            first = Content.assemble(("—", "bold"), f" · {where}")
            keys = "waiting for the meter"
        else:
            value = "OL" if s.overload else f"{volts_text(s.volts)} V"
            if s.settled:
                mark = ("● settled", "bold $text-success")
                keys = "a takes it"
            else:
                mark = ("◌ settling", "bold $text-warning")
                keys = "wait for ●, or A takes it unsettled"
            spread = f" ±{volts_text(s.spread / 2, 2)}" if s.spread else ""
            first = Content.assemble((value, "bold"), "  ", mark, f"{spread} · {where}")
        second = Content.styled(f"{keys} · {self.status}", "$text-muted")
        self.query_one("#meter-readout", Static).update(first + Content("\n") + second)
        self.query_one("#meter-spark", Sparkline).data = list(self.history)
