"""Modal dialogs: errors, resuming a session, recording a repair, the outcome, safety detail."""

from __future__ import annotations

from dataclasses import dataclass

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Grid, Horizontal, Vertical, VerticalScroll
from textual.content import Content
from textual.screen import ModalScreen
from textual.widgets import Button, DataTable, Input, Label, Select, Static

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.safety import SafetyFigures, format_duration
from fieldtool.core.diagnosis.faults import BOARD_TARGETS, modes_for, target_kind
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.words import count
from fieldtool.tui.view import volts_text

DONE_WORDS = ("replaced", "resoldered", "cleaned", "reworked", "adjusted", "inspected only")


class ErrorDialog(ModalScreen[None]):
    """A FieldtoolError shown as its title and message; never a traceback."""

    BINDINGS = [Binding("escape,enter", "dismiss", "Close")]

    def __init__(self, error: FieldtoolError) -> None:
        super().__init__()
        self.error = error

    def compose(self) -> ComposeResult:
        """Title, message, one button."""
        with Vertical(classes="dialog error"):
            yield Label(self.error.title, classes="dialog-title")
            yield Static(self.error.message, classes="dialog-body")
            yield Button("Close", id="close", variant="error")

    def on_button_pressed(self) -> None:
        """Close."""
        self.dismiss(None)


class ResumeDialog(ModalScreen[bool]):
    """Offer to pick up a board's unfinished session."""

    BINDINGS = [Binding("r", "choose(True)", "Resume"), Binding("n", "choose(False)", "New")]

    def __init__(self, serial: str, opened: str, readings: int, actions: int) -> None:
        super().__init__()
        self.text = (
            f"Board {serial} has a session opened {opened} that was never closed "
            f"({count(readings, 'reading')}, {count(actions, 'repair')} recorded). Resume it, "
            "or start a new "
            "session? The old records stay in the history either way."
        )

    def compose(self) -> ComposeResult:
        """The question and two buttons."""
        with Vertical(classes="dialog"):
            yield Label("Unfinished session", classes="dialog-title")
            yield Static(self.text, classes="dialog-body")
            with Horizontal(classes="dialog-buttons"):
                yield Button("Resume (r)", id="resume", variant="primary")
                yield Button("New session (n)", id="new")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Resume or not."""
        self.dismiss(event.button.id == "resume")

    def action_choose(self, resume: bool) -> None:
        """Resume or not, from a key."""
        self.dismiss(resume)


@dataclass(frozen=True)
class ActionForm:
    """What the technician did: to which part, what, the mode found, part used, note."""

    designator: str
    done: str
    mode: str | None
    part_used: str
    note: str


class ActionDialog(ModalScreen[ActionForm | None]):
    """Record a repair: designator, what was done, fault mode found, part used, note."""

    BINDINGS = [Binding("escape", "dismiss(None)", "Cancel"), Binding("ctrl+s", "save", "Save")]

    def __init__(self, profile: Profile, parts: list[tuple[str, str]], suggestion: tuple) -> None:
        super().__init__()
        self.profile = profile
        self.parts = parts  # (board designator, default ref)
        self.suggestion = suggestion  # (default ref, mode) of the top suspect, or (None, None)

    def _modes(self, ref: str | None) -> list[tuple[str, str]]:
        if ref is None:
            return []
        return [(m.words, m.name) for m in modes_for(self.profile, target_kind(ref, self.profile))]

    def compose(self) -> ComposeResult:
        """A compact form."""
        ref, mode = self.suggestion
        parts = [(shown, default) for shown, default in self.parts]
        with Vertical(classes="dialog form"):
            yield Label("Record a repair", classes="dialog-title")
            with Grid(classes="form-grid"):
                yield Label("Part")
                yield Select(parts, value=ref or Select.NULL, id="part", compact=True)
                yield Label("Found")
                modes = self._modes(ref)
                chosen = mode if mode in [m for _, m in modes] else Select.NULL
                yield Select(modes, value=chosen, id="mode", compact=True)
                yield Label("Done")
                yield Select(
                    [(w, w) for w in DONE_WORDS], value="replaced", id="done", compact=True
                )
                yield Label("Part used")
                yield Input(
                    placeholder="e.g. 1N4148W, 2.2µF 250V X7R", id="part-used", compact=True
                )
                yield Label("Note")
                yield Input(
                    placeholder="anything the next technician should know", id="note", compact=True
                )
            with Horizontal(classes="dialog-buttons"):
                yield Button("Save (ctrl+s)", id="save", variant="primary")
                yield Button("Cancel (esc)", id="cancel")

    def on_select_changed(self, event: Select.Changed) -> None:
        """A different part has different modes."""
        if event.select.id != "part":
            return
        mode = self.query_one("#mode", Select)
        ref = event.value if event.value is not Select.NULL else None
        current = mode.value
        options = self._modes(ref)
        mode.set_options(options)
        if current in [name for _, name in options]:
            mode.value = current

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Save or cancel."""
        if event.button.id == "save":
            self.action_save()
        else:
            self.dismiss(None)

    def action_save(self) -> None:
        """Hand the form back if a part is chosen."""
        part = self.query_one("#part", Select).value
        if part is Select.NULL:
            self.notify("Choose the part you worked on.", severity="warning")
            return
        mode = self.query_one("#mode", Select).value
        self.dismiss(
            ActionForm(
                designator=str(part),
                done=str(self.query_one("#done", Select).value),
                mode=None if mode is Select.NULL else str(mode),
                part_used=self.query_one("#part-used", Input).value.strip(),
                note=self.query_one("#note", Input).value.strip(),
            )
        )


class OutcomeDialog(ModalScreen[str | None]):
    """Close the session: fixed, not fixed, escalated; or keep working."""

    BINDINGS = [
        Binding("f", "choose('fixed')", "Fixed"),
        Binding("n", "choose('not-fixed')", "Not fixed"),
        Binding("e", "choose('escalated')", "Escalated"),
        Binding("escape", "dismiss(None)", "Keep working"),
    ]

    def __init__(self, summary: str) -> None:
        super().__init__()
        self.summary = summary

    def compose(self) -> ComposeResult:
        """The summary and the three outcomes."""
        with Vertical(classes="dialog"):
            yield Label("Close the session", classes="dialog-title")
            yield Static(self.summary, classes="dialog-body")
            with Horizontal(classes="dialog-buttons"):
                yield Button("Fixed (f)", id="fixed", variant="success")
                yield Button("Not fixed (n)", id="not-fixed", variant="warning")
                yield Button("Escalated (e)", id="escalated")
                yield Button("Back (esc)", id="keep")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """An outcome, or None to keep working."""
        self.dismiss(None if event.button.id == "keep" else event.button.id)

    def action_choose(self, outcome: str) -> None:
        """An outcome from a key."""
        self.dismiss(outcome)


class NoticeDialog(ModalScreen[None]):
    """A message the technician should read before going on (the demo's reveal)."""

    BINDINGS = [Binding("escape,enter", "dismiss", "Close")]

    def __init__(self, title: str, body: str | Content) -> None:
        super().__init__()
        self.title_text = title
        self.body = body

    def compose(self) -> ComposeResult:
        """Title, body, button."""
        with Vertical(classes="dialog"):
            yield Label(self.title_text, classes="dialog-title")
            yield Static(self.body, classes="dialog-body")
            yield Button("Close", id="close", variant="primary")

    def on_button_pressed(self) -> None:
        """Close."""
        self.dismiss(None)


class SafetyDetails(ModalScreen[None]):
    """Each capacitor's voltage and stored energy, saying which came from expected values."""

    BINDINGS = [Binding("escape,enter,s", "dismiss", "Close")]

    def __init__(self, figures: SafetyFigures) -> None:
        super().__init__()
        self.figures = figures

    def compose(self) -> ComposeResult:
        """A table of capacitors and the figures' basis."""
        f = self.figures
        with Vertical(classes="dialog wide"):
            yield Label("Stored charge", classes="dialog-title")
            yield Static(
                f"Safe level {f.safe_volts:g} V: {f.threshold_source}. Below it "
                f"{format_duration(f.discharge_s)} after power-off through the load and "
                "bleeder as the profile gives them: a lower bound, since a failed bleeder or an "
                "open diode strands charge longer. " + f.warning,
                classes="dialog-body",
            )
            with VerticalScroll():
                yield DataTable(id="charges", cursor_type="none")
            yield Button("Close", id="close", variant="primary")

    def on_mount(self) -> None:
        """Fill the table."""
        table = self.query_one("#charges", DataTable)
        table.add_columns("Part", "µF", "V across", "Energy", "From")
        for c in self.figures.capacitors:
            table.add_row(
                c.designator,
                f"{c.farads * 1e6:.3g}",
                volts_text(c.volts),
                f"{c.joules:.3g} J",
                "readings" if c.from_readings else "expected (node unread)",
            )

    def on_button_pressed(self) -> None:
        """Close."""
        self.dismiss(None)


def part_choices(profile: Profile, refs: list[str]) -> list[tuple[str, str]]:
    """(label shown, default ref) for every part and board target, in board order."""
    from fieldtool.core.circuit.spec import display_name

    return [(display_name(profile, r), r) for r in refs] + [(t, t) for t in BOARD_TARGETS]
