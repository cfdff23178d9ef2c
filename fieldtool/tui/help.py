"""The help screen: every key of every screen, read from the bindings themselves."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.screen import ModalScreen
from textual.widgets import Footer, Label, Markdown

from fieldtool.core.circuit.safety import SAFETY_WARNING

TYPED = """\
**Typed readings.** Type a digit (or press **t**) to start; Enter takes the value into the
selected node. Accepted: `12.9`, `12.9V`, `12,9` (decimal comma), `890mV`, `1.2kV`, `-3.3`,
`1e1`, `OL` (over range). Esc leaves the entry without taking anything.

**Node states** are shown by symbol and word, not only colour: `·` unread, `✓` in band,
`▲` high, `▼` low, `⊘` over range. In the ladder the selected node is in `[brackets]` and the
top three suspects carry ¹ ² ³ after their designator.

**Meter.** `●` settled (the last readings agree within the settle rule), `◌` settling. The
probe is taken to be on the selected node. A meter that is unplugged stops with a notice;
every reading already taken stays, and **m** connects again.
"""


KEY_NAMES = {
    "question_mark": "?",
    "escape": "esc",
    "left": "←",
    "right": "→",
    "up": "↑",
    "down": "↓",
}


def _key(binding: Binding) -> str:
    return " / ".join(KEY_NAMES.get(k.strip(), k.strip()) for k in binding.key.split(","))


def key_table(title: str, bindings: list[Binding]) -> str:
    """A compact Markdown list of keys and what they do."""
    rows = [f"### {title}", ""]
    for b in bindings:
        if isinstance(b, tuple):
            b = Binding(*b)
        rows.append(f"- `{_key(b)}` {b.tooltip or b.description or b.action}")
    return "\n".join(rows) + "\n"


def help_text() -> str:
    """Every screen's keys, the typed-entry syntax and the standing caution."""
    from fieldtool.tui.app import FieldtoolApp
    from fieldtool.tui.dialogs import ActionDialog, OutcomeDialog, ResumeDialog
    from fieldtool.tui.history import FleetScreen, HistoryScreen
    from fieldtool.tui.probing import ProbingScreen
    from fieldtool.tui.start import StartScreen

    table_keys = [Binding("up,down", "", "Select a node (the table's rows)")]
    parts = [
        key_table("Everywhere", FieldtoolApp.BINDINGS),
        key_table("Probing", table_keys + ProbingScreen.BINDINGS),
        TYPED,
        key_table("Start", StartScreen.BINDINGS + [Binding("tab", "", "Next field")]),
        key_table("Record a repair", ActionDialog.BINDINGS),
        key_table("Close the session", OutcomeDialog.BINDINGS),
        key_table("Unfinished session", ResumeDialog.BINDINGS),
        key_table("History and fleet", HistoryScreen.BINDINGS + FleetScreen.BINDINGS),
        f"**Safety.** {SAFETY_WARNING}",
    ]
    return "\n".join(parts)


class HelpScreen(ModalScreen[None]):
    """Every key and what it does."""

    BINDINGS = [Binding("escape,question_mark,f1,q", "dismiss", "Close help")]

    def compose(self) -> ComposeResult:
        """A scrolling Markdown page."""
        yield Label("Keys", classes="screen-title")
        yield Markdown(help_text(), id="help-text")
        yield Footer()

    def on_mount(self) -> None:
        """Focus the text so arrows scroll it."""
        self.query_one(Markdown).focus()
