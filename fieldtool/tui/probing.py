"""The probing screen: ladder, node table, suspects, meter and safety strips."""

from __future__ import annotations

from dataclasses import replace

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.content import Content
from textual.screen import Screen
from textual.widgets import Footer, Input, Static

from fieldtool.core.circuit.safety import node_hazard, safety_figures
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.faults import describe
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.words import count
from fieldtool.meters.parse import parse_typed
from fieldtool.tui.dialogs import (
    ActionDialog,
    ActionForm,
    ErrorDialog,
    OutcomeDialog,
    SafetyDetails,
    part_choices,
)
from fieldtool.tui.ladder import LadderView
from fieldtool.tui.meter_strip import MeterChoice, MeterStrip
from fieldtool.tui.node_table import NodeTable
from fieldtool.tui.panels import SafetyStrip, SuspectsPanel
from fieldtool.tui.session import BoardSession
from fieldtool.tui.view import volts_text

TYPING_KEYS = set("0123456789-.+,")
ACCEPT_LIVE = "Take the live value now, marked unsettled in the history"
TYPE_WORDS = "Type a reading for the selected node (a digit starts one too)"
REPAIR_WORDS = "Record a repair: part, fault mode found, what was done, part used, note"
SAFETY_DELAY_S = 0.15  # let the panels repaint before the safety figures are recomputed


def suspect_ref(key: str) -> str | None:
    """The default designator or board target a hypothesis key names (None for healthy)."""
    return None if key == "healthy" else key.split(":", 1)[0]


class ProbingScreen(Screen):
    """Guided probing of one board, then repair and verification."""

    BINDINGS = [
        Binding("n", "next_probe", "Next node", tooltip="Jump to the node worth probing next"),
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

    def __init__(self, session: BoardSession, choice: MeterChoice, demo_fault=None) -> None:
        super().__init__()
        self.session = session
        self.choice = choice
        self.demo_fault = demo_fault
        # Unread nodes count at their healthy expected value (the band's centre) for safety.
        d = session.dictionary
        self.expected = {n: d.band(n).expected for n in d.nodes}
        self.figures = None
        self.figures_for: dict | None = None
        self._safety_timer = None
        self.last_problem = ""

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
        yield MeterStrip(self.choice, p, id="meter")
        yield SafetyStrip(id="safety")
        yield Footer()

    def on_resize(self) -> None:
        """Tall terminals draw the whole ladder on more rows."""
        self.set_class(self.size.height >= 34, "-tall")

    def on_mount(self) -> None:
        """Show the session and start the safety computation."""
        self.refresh_all()
        self.query_one(NodeTable).focus()

    # --- state to widgets ----------------------------------------------------------------

    @property
    def selected(self) -> str | None:
        """The node the cursor is on."""
        return self.query_one(NodeTable).selected_node

    def title_text(self) -> Content:
        """Board, phase, meter and history state in one line."""
        s = self.session
        read = len(s.taken)
        total = len(s.dictionary.nodes)
        phase = "VERIFYING" if s.phase == "verifying" else "probing"
        unsaved = getattr(self.app, "unsaved_count", 0)
        saved = Content.styled(f" · ⚠ {unsaved} unsaved", "bold $text-error") if unsaved else ""
        return Content.assemble(
            (s.serial, "bold"),
            f" · {s.profile.name} · ",
            (phase, "bold $text-accent"),
            f" · {read}/{total} read",
            saved,
        )

    def refresh_title(self) -> None:
        """Redraw the title line (the history writer's state changed)."""
        self.query_one("#title", Static).update(self.title_text())

    def refresh_all(self) -> None:
        """Push the session's state down into every widget."""
        s = self.session
        values = s.volts_by_node()
        table = self.query_one(NodeTable)
        table.show(values)
        self.query_one(SuspectsPanel).show(s.diagnosis)
        ladder = self.query_one(LadderView)
        ladder.states = {n: table.verdict_for(n).state for n in s.dictionary.nodes}
        ladder.ranks = self._ranks()
        ladder.selected = self.selected
        self.query_one("#title", Static).update(self.title_text())
        self.query_one(
            "#entry", Input
        ).placeholder = f"volts at {self.selected}: 12.9, 890mV, 1.2kV or OL, then Enter"
        self._update_safety()

    def _ranks(self) -> dict[str, int]:
        ranks: dict[str, int] = {}
        for s in self.session.diagnosis.suspects:
            ref = suspect_ref(s.key)
            if ref is None or ref in ranks or s.probability < 0.05:
                continue
            ranks[ref] = len(ranks) + 1
            if len(ranks) == 3:
                break
        return ranks

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
        self.query_one(MeterStrip).probe_node = node
        self.query_one(
            "#entry", Input
        ).placeholder = f"volts at {node}: 12.9, 890mV, 1.2kV or OL, then Enter"
        self.query_one(SafetyStrip).show(self.figures, node, self._hazard(node))

    def on_key(self, event) -> None:
        """A digit typed anywhere but the entry starts a typed reading."""
        entry = self.query_one("#entry", Input)
        if self.focused is entry or event.character is None:
            return
        if event.character in TYPING_KEYS:
            entry.value = event.character
            entry.cursor_position = len(entry.value)
            entry.focus()
            event.stop()

    @on(Input.Submitted, "#entry")
    def _typed(self, event: Input.Submitted) -> None:
        node = self.selected
        if node is None:
            return
        try:
            reading = parse_typed(event.value)
        except FieldtoolError as exc:
            self.app.push_screen(ErrorDialog(exc))
            return  # the text stays in the entry to be corrected
        event.input.value = ""
        self.take(node, reading.volts, "typed", None)
        self.query_one(NodeTable).focus()

    def on_meter_strip_problem(self, message: MeterStrip.Problem) -> None:
        """Say what happened to the meter, once; readings already taken stay."""
        text = f"{message.error.title}: {message.error.message}"
        if text != self.last_problem:
            self.last_problem = text
            kept = f" All {len(self.session.taken)} readings are kept." if message.lost else ""
            self.notify(
                message.error.message + kept,
                title=message.error.title,
                severity="error" if message.lost else "warning",
                timeout=8,
            )
        self.refresh_bindings()

    def on_meter_strip_connected(self, message: MeterStrip.Connected) -> None:
        """The meter is back (or there for the first time)."""
        self.last_problem = ""
        self.query_one(MeterStrip).probe_node = self.selected
        self.refresh_bindings()

    def take(self, node: str, volts: float | None, source: str, spread: float | None) -> None:
        """Accept a reading: saved at once, the diagnosis and every panel updated."""
        self.session.accept(node, volts, source, spread)
        self.refresh_all()

    # --- actions -------------------------------------------------------------------------

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Show only the keys that work now."""
        strip = self.query_one(MeterStrip) if self.is_mounted else None
        if action == "accept":
            return strip is not None and strip.live
        if action == "reconnect":
            return strip is not None and self.choice.kind != "typed" and not strip.live
        if action == "next_probe":
            return self.session.diagnosis.next_probe is not None or None
        return True

    def action_next_probe(self) -> None:
        """Jump to the suggested next node."""
        node = self.session.diagnosis.next_probe
        if node is not None:
            self.query_one(NodeTable).select(node)

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
        source = strip.identity or self.choice.words
        if not s.settled:
            source += " (unsettled)"
        self.take(strip.probe_node or self.selected, s.volts, source, s.spread)
        strip.reset_window()

    def action_type_reading(self) -> None:
        """Focus the entry to type a reading."""
        self.query_one("#entry", Input).focus()

    def action_reconnect(self) -> None:
        """Try the meter again."""
        self.query_one(MeterStrip).start()

    def action_safety(self) -> None:
        """Each capacitor's charge."""
        if self.figures is None:
            self.notify("Safety figures are still being computed.")
            return
        self.app.push_screen(SafetyDetails(self.figures))

    def action_history(self) -> None:
        """The board's timeline."""
        self.app.action_history(self.session.serial)

    def action_fleet(self) -> None:
        """Failure counts for this board type."""
        self.app.action_fleet(self.session.profile.name)

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
        self.session.record_action(shown, form.done, form.mode, form.part_used, form.note)
        if self.demo_fault is not None and form.designator == self.demo_fault.target:
            if form.done != "inspected only":
                strip = self.query_one(MeterStrip)
                strip.choice = self.choice = replace(self.choice, fault=None)
                strip.start()
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
        reveal = self.reveal() if self.demo_fault is not None else None
        # Leave the dialog's dismissal to finish before this screen is replaced.
        self.app.call_later(self.app.session_finished, reveal)

    def reveal(self) -> str:
        """Whether the tool (and the technician) found the demo's hidden fault."""
        fault = self.demo_fault
        p = self.session.profile
        hidden = describe(fault, p)
        target = display_name(p, fault.target)
        repaired = [a for a in self.session.actions if a.designator == target]
        if repaired:
            verdict = f"Found: you worked on {target}."
        else:
            done = ", ".join(a.designator for a in self.session.actions) or "no part"
            verdict = f"Not found: you worked on {done}."
        tool = "; ".join(f"{w} ({p:.0%})" for w, p in self.session.at_repairs)
        ranked = f" The tool's top suspect when you repaired: {tool}." if tool else ""
        v = self.session.volts_by_node()
        read = ", ".join(f"{n} {volts_text(x)} V" for n, x in v.items()) or "none"
        if self.session.actions:
            after = f"Readings after the last repair: {read}."
        else:
            after = f"No repair was recorded. Readings: {read}."
        return f"The hidden fault was {hidden}. {verdict}{ranked} {after}"
