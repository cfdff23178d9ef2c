"""The help screen: every key of every screen, read from the bindings themselves.

The app gathers the screens' bindings into the text (``app.help_text``); this module knows
no screen.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.screen import ModalScreen
from textual.widgets import Footer, Label, Markdown

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


class HelpScreen(ModalScreen[None]):
    """Every key and what it does."""

    BINDINGS = [Binding("escape,question_mark,f1,q", "dismiss", "Close help")]

    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text

    def compose(self) -> ComposeResult:
        """A scrolling Markdown page."""
        yield Label("Keys", classes="screen-title")
        yield Markdown(self.text, id="help-text")
        yield Footer()

    def on_mount(self) -> None:
        """Focus the text so arrows scroll it."""
        self.query_one(Markdown).focus()
