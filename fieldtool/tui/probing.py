"""The probing screen: ladder, node table, suspects, meter and safety strips.

It runs one ``core.session.BoardSession`` and the meter's reading loop (a thread worker; what
the loop tells comes back as ``MeterLink`` messages), and posts ``SessionEnded`` when the
session is closed.
"""

from __future__ import annotations

from dataclasses import replace
from functools import partial
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.content import Content
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Footer, Input, Static
from textual.worker import Worker, WorkerState

from fieldtool.core.circuit.safety import node_hazard, safety_figures
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.history import Action
from fieldtool.core.measurement import Measurement
from fieldtool.core.session import BoardSession
from fieldtool.core.times import now_utc
from fieldtool.core.units import format_si
from fieldtool.core.words import count
from fieldtool.meters.loop import MeterLoop
from fieldtool.meters.parse import parse_typed
from fieldtool.tui.dialogs import (
    ActionDialog,
    ActionForm,
    ErrorDialog,
    OutcomeDialog,
    SafetyDetails,
    part_choices,
)
from fieldtool.tui.history import FleetScreen, HistoryScreen
from fieldtool.tui.kinds import STRIP_NAMES, glance, suggested
from fieldtool.tui.ladder import LadderView
from fieldtool.tui.measuring import MEASURING_BINDINGS, MEASURING_PALETTE, MeasuringFlow
from fieldtool.tui.meter_strip import MeterChoice, MeterLink, MeterStrip, open_meter
from fieldtool.tui.node_table import NodeTable
from fieldtool.tui.palette import Commands
from fieldtool.tui.panels import SafetyStrip, SuspectsPanel
from fieldtool.tui.view import entry_hint, ladder_ranks, reveal_text, suspect_ref

TYPING_KEYS = set("0123456789-.+,")
ACCEPT_LIVE = "Take the live value now, marked unsettled in the history"
TYPE_WORDS = "Type a reading for the selected node (a digit starts one too)"
REPAIR_WORDS = "Record a repair: part, fault mode found, what was done, part used, note"
SAFETY_DELAY_S = 0.15  # let the panels repaint before the safety figures are recomputed


class ProbingScreen(MeasuringFlow, Commands, Screen):
    """Guided probing of one board, then repair and verification."""

    PALETTE = (
        ("Go to the next measurement", "The node and kind the diagnosis suggests", "next_probe"),
        *MEASURING_PALETTE,
        ("Accept the settled reading", "Take the meter's settled value at this node", "accept"),
        ("Type a reading", "Enter a value by hand", "type_reading"),
        ("Record a repair", "Designator, what was done, part used, note", "repair"),
        ("Close the session", "Fixed, not fixed or escalated", "close_session"),
        ("Safety details", "Each capacitor's voltage and stored energy", "safety"),
        ("Board history", "This board's timeline", "history"),
        ("Fleet failures", "Confirmed failures on this board type", "fleet"),
        ("Reconnect the meter", "Open the meter's port again", "reconnect"),
    )

    class SessionEnded(Message):
        """The session is closed and saved; ``reveal`` tells the demo's hidden fault, if any."""

        def __init__(self, reveal: str | None) -> None:
            super().__init__()
            self.reveal = reveal

    BINDINGS = [
        Binding("n", "next_probe", "Next", tooltip="Go to the measurement worth taking next"),
        *MEASURING_BINDINGS,
        Binding("a", "accept", "Accept settled", tooltip="Take the settled meter value here"),
        Binding("A", "accept(False)", "Accept live", show=False, tooltip=ACCEPT_LIVE),
        Binding("t", "type_reading", "Type", tooltip=TYPE_WORDS),
        Binding("left", "move(-1)", "Previous node along the ladder", show=False),
        Binding("right", "move(1)", "Next node along the ladder", show=False),
        Binding("r", "repair", "Repair", tooltip=REPAIR_WORDS),
        Binding(
            "c", "close_session", "Close", tooltip="Close the session: fixed, not fixed, escalated"
        ),
        Binding("s", "safety", "Safety", tooltip="Each capacitor's voltage and stored energy"),
        Binding("h", "history", "History", tooltip="This board's timeline"),
        Binding("f", "fleet", "Fleet", show=False, tooltip="Confirmed failures on this board type"),
        Binding("m", "reconnect", "Reconnect", tooltip="Open the meter's port again after a loss"),
    ]

    def __init__(
        self, session: BoardSession, choice: MeterChoice, logs_dir: Path, demo_fault=None
    ) -> None:
        super().__init__()
        self.session = session
        self.choice = choice
        self.logs_dir = Path(logs_dir)
        self.demo_fault = demo_fault
        self.unsaved = 0  # records handed to the history writer and not saved yet
        self._meter: MeterLoop | None = None
        self._link: MeterLink | None = None
        self._meter_worker: Worker | None = None
        # Unread nodes count at their healthy expected value (the band's centre) for safety.
        d = session.dictionary
        self.expected = {n: d.band(n).expected for n in d.nodes}
        self.figures = None
        self.figures_for: dict | None = None
        self._safety_timer = None
        self.last_problem = ""
        self.init_measuring()

    # --- layout --------------------------------------------------------------------------

    def compose(self) -> ComposeResult:
        """Title, ladder, table and suspects, entry, meter and safety strips, footer."""
        p = self.session.profile
        yield Static(id="title")
        yield LadderView(p, id="ladder")
        with Horizontal(id="middle"):
            yield NodeTable(self.session.dictionary, p.labels, id="nodes")
            yield SuspectsPanel(p.labels, id="suspects")
        yield Input(
            id="entry",
            compact=True,
            select_on_focus=False,
            placeholder="type a reading, e.g. 12.9 or 890mV or OL",
        )
        yield MeterStrip(self.choice, id="meter")
        yield SafetyStrip(id="safety")
        yield Footer()

    def on_resize(self) -> None:
        """Tall terminals draw the whole ladder on more rows."""
        self.set_class(self.size.height >= 34, "-tall")

    def on_mount(self) -> None:
        """Show the session, follow the history writer, start the meter."""
        self.refresh_all()
        self.query_one(NodeTable).focus()
        self.watch(self.app, "unsaved_count", self._unsaved_changed)
        self.start_meter()

    def on_unmount(self) -> None:
        """Let the meter loop end."""
        if self._meter is not None:
            self._meter.stop()

    # --- state to widgets ----------------------------------------------------------------

    @property
    def selected(self) -> str | None:
        """The node the cursor is on."""
        return self.query_one(NodeTable).selected_node

    def select_node(self, node: str) -> None:
        """Move the cursor to ``node``."""
        self.query_one(NodeTable).select(node)

    def measuring_changed(self) -> None:
        """The kind or the board's power changed: show it."""
        strip = self.query_one(MeterStrip)
        q = self.measuring.quantity
        strip.kind_words = STRIP_NAMES.get(q.name, "")
        strip.probe_node = self.place
        self.query_one("#entry", Input).placeholder = entry_hint(self.place, q)
        self.refresh_all()

    def title_text(self) -> Content:
        """Board, phase, power, meter and history state in one line."""
        s = self.session
        read = len({at for at, _ in s.taken})  # nodes measured in this phase
        total = len(s.dictionary.nodes)
        phase = "VERIFYING" if s.phase == "verifying" else "probing"
        unsaved = self.unsaved
        saved = Content.styled(f" · ⚠ {unsaved} unsaved", "bold $text-error") if unsaved else ""
        power = Content.styled(" · board OFF", "bold $text-error") if not s.powered else ""
        load = f" · {format_si(self.load_on)}Ω load on" if self.load_on else ""
        return Content.assemble(
            (s.serial, "bold"),
            f" · {s.profile.name} · ",
            (phase, "bold $text-accent"),
            f" · {read}/{total} read",
            power,
            load,
            saved,
        )

    def _unsaved_changed(self, count: int) -> None:
        """The history writer's backlog changed: redraw the title line."""
        self.unsaved = count
        self.query_one("#title", Static).update(self.title_text())

    def refresh_all(self) -> None:
        """Push the session's state down into every widget."""
        s = self.session
        values = s.volts_by_node()
        table = self.query_one(NodeTable)
        table.show(values)
        self.query_one(SuspectsPanel).show(s.diagnosis, glance(s, self.selected))
        ladder = self.query_one(LadderView)
        ladder.states = {n: table.verdict_for(n).state for n in s.dictionary.nodes}
        ladder.ranks = ladder_ranks(self.session.diagnosis)
        ladder.selected = self.selected
        self.query_one("#title", Static).update(self.title_text())
        self.query_one("#entry", Input).placeholder = entry_hint(
            self.place, self.measuring.quantity
        )
        self._update_safety()

    def _hazard(self, node: str | None) -> bool:
        values = self.session.volts_by_node()
        return node is not None and node_hazard(
            node, self.expected, values, self.session.profile.safe_volts
        )

    def _update_safety(self) -> None:
        self.query_one(SafetyStrip).show(self.figures, self.selected, self._hazard(self.selected))
        # After the panels have repainted: the figures follow a moment later, off the UI thread.
        if self._safety_timer is not None:
            self._safety_timer.stop()
        self._safety_timer = self.set_timer(SAFETY_DELAY_S, self._compute_safety)

    @property
    def safety_current(self) -> bool:
        """True when the safety figures are for the readings now held."""
        return self.figures is not None and self.figures_for == self.session.volts_by_node()

    @work(thread=True, exclusive=True, group="safety", exit_on_error=False)
    def _compute_safety(self) -> None:
        values = self.session.volts_by_node()
        figures = safety_figures(self.session.profile, self.expected, values)
        self.app.call_from_thread(self._safety_ready, figures, values)

    def _safety_ready(self, figures, values) -> None:
        if values != self.session.volts_by_node():
            return  # a newer reading is on its way
        self.figures = figures
        self.figures_for = values
        self.query_one(SafetyStrip).show(figures, self.selected, self._hazard(self.selected))

    # --- events --------------------------------------------------------------------------

    @on(NodeTable.Selected)
    def _moved(self, message: NodeTable.Selected) -> None:
        node = message.node
        self.query_one(LadderView).selected = node
        if self.measuring.quantity.taken_at == "node":
            self.query_one(MeterStrip).probe_node = node
            if self._meter is not None:
                self._meter.place_probe(node)
        self.query_one(SuspectsPanel).show(self.session.diagnosis, glance(self.session, node))
        self.query_one("#entry", Input).placeholder = entry_hint(
            self.place, self.measuring.quantity
        )
        self.query_one(SafetyStrip).show(self.figures, node, self._hazard(node))

    def on_key(self, event) -> None:
        """A digit typed anywhere but the entry starts a typed reading."""
        entry = self.query_one("#entry", Input)
        if event.character is None or event.character not in TYPING_KEYS:
            return
        if self.focused is entry:
            # The entry keeps its own keys; one seen here was sent to another widget before
            # the entry took the focus (keys typed fast after the first digit): it belongs there.
            entry.insert_text_at_cursor(event.character)
        else:
            entry.value = event.character
            entry.cursor_position = len(entry.value)
            self.set_focus(entry)
        event.stop()

    @on(Input.Submitted, "#entry")
    def _typed(self, event: Input.Submitted) -> None:
        node = self.place
        if node is None:
            return
        try:
            typed = parse_typed(event.value, self.measuring.quantity, self.measuring.conditions)
        except FieldtoolError as exc:
            self.app.push_screen(ErrorDialog(exc))
            return  # the text stays in the entry to be corrected
        if self.take(replace(typed, at=node, taken=now_utc())):
            event.input.value = ""
            self.query_one(NodeTable).focus()

    # --- the meter ---------------------------------------------------------------------

    def start_meter(self) -> None:
        """(Re)connect the meter the session reads (nothing to do when readings are typed)."""
        if self.choice.kind == "typed":
            return
        if self._meter is not None:
            self._meter.stop()
        self._link = MeterLink(self.query_one(MeterStrip))
        self._meter = MeterLoop(partial(open_meter, self.choice, self.session.profile), self._link)
        self.tell_meter()
        self.query_one(MeterStrip).follow(self._link, self.choice)
        self._meter_worker = self.run_worker(
            self._meter.run, thread=True, exclusive=True, group="meter", exit_on_error=False
        )

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A meter loop that failed unexpectedly leaves no meter (the app shows the error)."""
        if event.worker is self._meter_worker and event.state == WorkerState.ERROR:
            self.query_one(MeterStrip).stopped()
            self.refresh_bindings()

    def on_meter_link_connected(self, message: MeterLink.Connected) -> None:
        """The meter is there (again, or for the first time)."""
        self.last_problem = ""
        self.query_one(MeterStrip).probe_node = self.place
        self.refresh_bindings()

    def on_meter_link_problem(self, message: MeterLink.Problem) -> None:
        """Say what happened to the meter, once; readings already taken stay."""
        text = f"{message.error.title}: {message.error.message}"
        if text != self.last_problem:
            self.last_problem = text
            kept = " Every reading taken so far is kept." if message.lost else ""
            self.notify(
                message.error.message + kept,
                title=message.error.title,
                severity="error" if message.lost else "warning",
                timeout=8,
            )
        self.refresh_bindings()

    def take(self, measurement: Measurement) -> bool:
        """Accept a measurement: saved at once, the diagnosis and every panel updated. A value
        the session refuses (beyond anything this board can show) is a dialog, and False."""
        try:
            self.session.take(measurement)
        except FieldtoolError as exc:
            self.app.push_screen(ErrorDialog(exc))
            return False
        self.refresh_all()
        return True

    # --- actions -------------------------------------------------------------------------

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Show only the keys that work now."""
        strip = self.query_one(MeterStrip) if self.is_mounted else None
        if action == "accept":
            return strip is not None and strip.live
        if action == "reconnect":
            return strip is not None and self.choice.kind != "typed" and not strip.live
        if action == "next_probe":
            return suggested(self.session) is not None or None
        return True

    def action_next_probe(self) -> None:
        """Go to the suggested next measurement."""
        self.action_next_measurement()

    def action_move(self, step: int) -> None:
        """Move along the ladder."""
        table = self.query_one(NodeTable)
        nodes = self.session.dictionary.nodes
        table.select(nodes[(nodes.index(self.selected) + step) % len(nodes)])

    def action_accept(self, settled_only: bool = True) -> None:
        """Take the meter's settled value (or, with A, the live value) into the selected node."""
        strip = self.query_one(MeterStrip)
        s = strip.settle
        if s is None:
            self.notify("No value from the meter at this node yet.", severity="warning")
            return
        if settled_only and not s.settled:
            self.notify("Not settled yet; wait for ● settled, or press A to take it anyway.")
            return
        if s.quantity != self.measuring.quantity:
            self.notify(
                f"The meter shows {s.quantity.words}, not {self.measuring.quantity.words}: "
                "turn its dial, or press k to choose the kind it shows.",
                severity="warning",
            )
            return
        self.take(s.placed(self.place))
        strip.reset_window()

    def action_type_reading(self) -> None:
        """Focus the entry to type a reading."""
        self.query_one("#entry", Input).focus()

    def action_reconnect(self) -> None:
        """Try the meter again."""
        self.start_meter()

    def action_safety(self) -> None:
        """Each capacitor's charge."""
        if self.figures is None:
            self.notify("Safety figures are still being computed.")
            return
        self.app.push_screen(SafetyDetails(self.figures))

    def action_history(self) -> None:
        """The board's timeline."""
        self.app.push_screen(HistoryScreen(self.logs_dir, self.session.serial))

    def action_fleet(self) -> None:
        """Failure counts for this board type."""
        self.app.push_screen(FleetScreen(self.logs_dir, self.session.profile.name))

    def action_repair(self) -> None:
        """Record what was done to which part."""
        top = next((s for s in self.session.diagnosis.suspects if s.key != "healthy"), None)
        suggestion = (suspect_ref(top.key), top.mode) if top else (None, None)
        refs = self.session.dictionary_parts()
        choices = part_choices(self.session.profile, refs)
        self.app.push_screen(
            ActionDialog(self.session.profile, choices, suggestion), self._repaired
        )

    def _repaired(self, form: ActionForm | None) -> None:
        if form is None:
            return
        shown = display_name(self.session.profile, form.designator)
        action = Action(shown, form.done, form.mode, form.part_used or None, form.note)
        self.session.record_repair(action)
        if self.demo_fault is not None and form.designator == self.demo_fault.target:
            if form.done != "inspected only":
                self.choice = replace(self.choice, fault=None)  # the simulated board is mended
                self.start_meter()
        self.notify(f"Saved: {shown} {form.done}. Take verification readings now.")
        self.refresh_all()

    def action_close_session(self) -> None:
        """Record the outcome and end the session."""
        s = self.session
        top = s.diagnosis.suspects[0] if s.diagnosis.suspects else None
        lines = [
            f"{count(len(s.taken), 'reading')} in this phase, "
            f"{count(len(s.actions), 'repair')} recorded."
        ]
        if top is not None:
            lines.append(f"Top suspect now: {top.words} ({top.probability:.0%}).")
        self.app.push_screen(OutcomeDialog(" ".join(lines)), self._session_closed)

    def _session_closed(self, outcome: str | None) -> None:
        if outcome is None:
            return
        self.session.close(outcome)
        reveal = reveal_text(self.session, self.demo_fault) if self.demo_fault else None
        self.post_message(self.SessionEnded(reveal))
