"""The meter strip (live value, settling, a sparkline) and the link from the meter's loop.

The reading itself is done by ``meters.loop.MeterLoop`` in a thread worker of the probing
screen; ``MeterLink`` is its listener and posts what the loop tells to the strip as messages.
The strip draws them (samples at the probed node judged by the meter's settle rule,
``meters.settle.judge``) and lets them bubble on to the screen, which says what went wrong.
The screen sets ``probe_node`` and which link to follow (attributes down).
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

from textual.containers import Horizontal
from textual.content import Content
from textual.message import Message
from textual.message_pump import MessagePump
from textual.reactive import reactive
from textual.widgets import Sparkline, Static

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis.faults import Fault
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.measurement import DC, Measurement, Source
from fieldtool.core.words import reading_words
from fieldtool.meters.base import Meter
from fieldtool.meters.connect import open_serial_meter
from fieldtool.meters.errors import MeterSettingsError, MeterTransientError
from fieldtool.meters.loop import MeterListener, MeterLoop
from fieldtool.meters.settings import MeterSettings
from fieldtool.meters.settle import judge
from fieldtool.meters.simulated import SimulatedMeter
from fieldtool.tui.view import volts_text

SPARK_POINTS = 40


@dataclass(frozen=True)
class MeterChoice:
    """Which meter the session reads: typed only, a serial port or URL, or the simulated one."""

    kind: str = "typed"  # "typed" | "port" | "simulated"
    port: str = ""
    settings: MeterSettings = field(default_factory=MeterSettings)
    fault: Fault | None = None  # simulated meter: the board's hidden fault
    seed: int = 0


def open_meter(choice: MeterChoice, profile: Profile) -> Meter:
    """The meter for a choice, not yet connected (blocking: the meter loop calls it)."""
    if choice.kind == "simulated":
        return SimulatedMeter(profile, fault=choice.fault, seed=choice.seed)
    return open_serial_meter(choice.port, choice.settings)


class MeterLink(MeterListener):
    """A meter loop's listener that posts what it is told to ``target`` as messages."""

    class Connected(Message):
        """The meter answered."""

        def __init__(self, link: MeterLink, source: Source) -> None:
            super().__init__()
            self.link = link  # the link that posted it (a loop since replaced is ignored)
            self.source = source  # the meter (its identity, or its port)

    class Sample(Message):
        """A sample, placed at the node the probe was on."""

        def __init__(self, link: MeterLink, sample: Measurement) -> None:
            super().__init__()
            self.link = link
            self.sample = sample

    class Problem(Message):
        """A reading failed (``lost`` False: the loop goes on) or the loop stopped (True)."""

        def __init__(self, link: MeterLink, error: FieldtoolError, lost: bool) -> None:
            super().__init__()
            self.link = link
            self.error = error
            self.lost = lost

    def __init__(self, target: MessagePump) -> None:
        self.target = target
        self.loop: MeterLoop | None = None

    def _post(self, message: Message) -> None:
        try:
            self.target.post_message(message)
        except RuntimeError:  # the app's event loop has closed: nobody is listening
            if self.loop is not None:
                self.loop.stop()

    def started(self, loop: MeterLoop) -> None:
        """Keep the loop, to stop it once nobody listens."""
        self.loop = loop

    def connected(self, source: Source) -> None:
        """Tell the screen the meter answered."""
        self._post(self.Connected(self, source))

    def received(self, sample: Measurement) -> None:
        """Hand the sample to the screen."""
        self._post(self.Sample(self, sample))

    def failed(self, error: MeterTransientError) -> None:
        """Tell the screen a reading failed; the loop goes on."""
        self._post(self.Problem(self, error, lost=False))

    def refused(self, error: MeterSettingsError) -> None:
        """Tell the screen the meter cannot be set to that kind; it reads on in its own."""
        self._post(self.Problem(self, error, lost=False))

    def lost(self, error: FieldtoolError) -> None:
        """Tell the screen the loop stopped."""
        self._post(self.Problem(self, error, lost=True))


class MeterStrip(Horizontal):
    """Live meter value, settling state and recent history, as the screen tells them."""

    probe_node: reactive[str | None] = reactive(None)
    kind_words: reactive[str] = reactive("")  # the kind asked for, "" for DC volts
    status: reactive[str] = reactive("")

    def __init__(self, choice: MeterChoice, **kwargs) -> None:
        super().__init__(**kwargs)
        self.choice = choice
        self.rule = choice.settings.settle
        self.window: list[Measurement] = []
        self.history: deque[float] = deque(maxlen=SPARK_POINTS)
        self.identity = ""
        self.live = False  # a meter is connected and being read
        self.link: MeterLink | None = None  # messages from any other link are stale

    def compose(self):
        """A text readout and a sparkline."""
        yield Static(id="meter-readout")
        yield Sparkline([], id="meter-spark")

    def on_mount(self) -> None:
        """Title the strip and draw it."""
        self.border_title = "Meter"
        self.status = "type a reading: t or a digit" if self.choice.kind == "typed" else "opening"
        self._show()

    @property
    def settle(self) -> Measurement | None:
        """The samples at the probed node judged by the settle rule (None before any)."""
        return judge(self.window, self.rule)

    def follow(self, link: MeterLink, choice: MeterChoice) -> None:
        """A new meter loop reports through ``link``; what came before is forgotten."""
        self.link = link
        self.choice = choice
        self.live = False
        self.status = "connecting"
        self.reset_window()

    def on_meter_link_connected(self, message: MeterLink.Connected) -> None:
        """The meter answered."""
        if message.link is not self.link:
            message.stop()
            return
        self.identity = str(message.source)
        self.live = True
        self.status = self.identity

    def on_meter_link_sample(self, message: MeterLink.Sample) -> None:
        """Draw a sample taken at the probed node."""
        message.stop()
        if message.link is self.link and message.sample.at == self.probe_node:
            self.add(message.sample)

    def on_meter_link_problem(self, message: MeterLink.Problem) -> None:
        """A lost meter leaves no meter connected."""
        if message.link is not self.link:
            message.stop()
        elif message.lost:
            self.stopped(message.error)

    def stopped(self, error: FieldtoolError | None = None) -> None:
        """The meter loop ended (with the error that ended it, if one did)."""
        self.live = False
        reason = error.title.lower() if error else "it stopped unexpectedly"
        self.status = f"no meter: {reason} (m reconnects)"

    def add(self, sample: Measurement) -> None:
        """A sample at the probed node."""
        self.window.append(sample)
        del self.window[: -max(self.rule.count * 4, 8)]
        if sample.value is not None:
            self.history.append(sample.value)
        self._show()

    def reset_window(self) -> None:
        """Forget the samples so far (the probe moved, or a value was taken)."""
        self.window = []
        self._show()

    def watch_probe_node(self) -> None:
        """The probe moved: the value must settle again."""
        self.reset_window()

    def watch_kind_words(self) -> None:
        """The dial turned: the value must settle again."""
        self.reset_window()

    def watch_status(self) -> None:
        self._show()

    def _show(self) -> None:
        if not self.is_mounted:
            return
        s = self.settle
        where = f"probe on {self.probe_node}" if self.probe_node else "probe lifted"
        if self.kind_words:
            where = f"{self.kind_words} · {where}"
        if self.choice.kind == "typed":
            first = Content.assemble(("typed readings", "bold"), f" · {where}")
            keys = "type a value (t or a digit), Enter takes it"
        elif s is None:
            first = Content.assemble(("—", "bold"), f" · {where}")
            keys = "waiting for the meter"
        else:
            if s.quantity == DC or s.overload:
                value = "OL" if s.overload else f"{volts_text(s.value)} {s.unit}"
            else:
                value = reading_words(s.value, s.unit)
            if s.settled:
                mark = ("● settled", "bold $text-success")
                keys = "a takes it"
            else:
                mark = ("◌ settling", "bold $text-warning")
                keys = "wait for ●, or A takes it unsettled"
            spread = ""
            if s.spread:
                half = s.spread / 2
                spread = (
                    f" ±{volts_text(half, 2) if s.quantity == DC else reading_words(half, s.unit)}"
                )
            first = Content.assemble((value, "bold"), "  ", mark, f"{spread} · {where}")
        second = Content.styled(f"{keys} · {self.status}", "$text-muted")
        self.query_one("#meter-readout", Static).update(first + Content("\n") + second)
        self.query_one("#meter-spark", Sparkline).data = list(self.history)
