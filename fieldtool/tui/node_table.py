"""The node table: node, test point, expected with its band, measured, deviation, verdict.

Drawn as text lines rather than a DataTable: one row a node, the cursor row marked with ``▶``
and reversed, the rows scrolled so the cursor stays in view. Redrawing a reading costs one
render of the visible lines (a DataTable re-renders every cell through Rich and took most of
a reading's repaint time).
"""

from __future__ import annotations

from textual import events
from textual.binding import Binding
from textual.content import Content
from textual.message import Message
from textual.reactive import reactive
from textual.widget import Widget

from fieldtool.core.circuit.reading_range import node_volts_range
from fieldtool.core.diagnosis.dictionary import FaultDictionary
from fieldtool.tui.view import SHORT, STYLE, Verdict, band_text, deviation_text, verdict, volts_text

WIDE_TABLE = 62  # content width from which test points and expected values show


class NodeTable(Widget, can_focus=True):
    """One row a node, a cursor on the selected one; posts ``Selected`` when it moves."""

    BINDINGS = [
        Binding("up", "cursor(-1)", "Up", show=False),
        Binding("down", "cursor(1)", "Down", show=False),
        Binding("pageup", "cursor(-10)", show=False),
        Binding("pagedown", "cursor(10)", show=False),
        Binding("home", "cursor(-1000)", show=False),
        Binding("end", "cursor(1000)", show=False),
    ]

    cursor: reactive[int] = reactive(0)

    class Selected(Message):
        """The cursor moved to ``node``."""

        def __init__(self, node: str) -> None:
            super().__init__()
            self.node = node

    def __init__(self, dictionary: FaultDictionary, labels: dict[str, str], **kwargs) -> None:
        super().__init__(**kwargs)
        self.dictionary = dictionary
        self.nodes = tuple(dictionary.nodes)
        self.labels = labels
        self.values: dict[str, float | None] = {}
        self.bands = {n: dictionary.band(n) for n in self.nodes}
        self.plausible = node_volts_range(dictionary.profile)
        self.top = 0  # first row in view
        self.tp_width = max([2] + [len(t) for t in labels.values()])
        # Band columns as wide as the widest band, so a negative one is never cut.
        self.band_width = max([10] + [len(self._band(n)) for n in self.nodes]) + 1
        self.expected_width = max([18] + [len(self._expected(n)) for n in self.nodes]) + 1

    def on_mount(self) -> None:
        """Title the panel."""
        self.border_title = "Nodes"

    @property
    def wide(self) -> bool:
        """True when there is room for the test point and expected columns."""
        return self.size.width >= WIDE_TABLE

    @property
    def selected_node(self) -> str:
        """The node under the cursor."""
        return self.nodes[self.cursor]

    def select(self, node: str) -> None:
        """Put the cursor on a node."""
        self.cursor = self.nodes.index(node)

    def action_cursor(self, step: int) -> None:
        """Move the cursor, stopping at the ends."""
        self.cursor = min(max(self.cursor + step, 0), len(self.nodes) - 1)

    def watch_cursor(self, old: int, new: int) -> None:
        """Keep the cursor in view and say where it is."""
        self._scroll_to_cursor()
        self.refresh()
        if old != new:
            self.post_message(self.Selected(self.nodes[new]))

    def on_resize(self) -> None:
        """The rows in view depend on the height."""
        self._scroll_to_cursor()

    def _rows_in_view(self) -> int:
        return max(1, self.size.height - 1)

    def _scroll_to_cursor(self) -> None:
        rows = self._rows_in_view()
        if self.cursor < self.top:
            self.top = self.cursor
        elif self.cursor >= self.top + rows:
            self.top = self.cursor - rows + 1
        self.top = max(0, min(self.top, len(self.nodes) - rows))
        # The caption follows the rows in view here, not in render: a subtitle changed while
        # rendering would show only on the next repaint (stale after a jump).
        shown = min(rows, len(self.nodes) - self.top)
        if self.top > 0 or self.top + shown < len(self.nodes):
            self.border_subtitle = f" rows {self.top + 1}–{self.top + shown} of {len(self.nodes)}"
        else:
            self.border_subtitle = ""

    def on_click(self, event: events.Click) -> None:
        """A click selects the row under it."""
        row = self.top + event.y - 1
        if event.y >= 1 and 0 <= row < len(self.nodes):
            self.cursor = row

    def on_mouse_scroll_down(self) -> None:
        """The wheel moves the cursor."""
        self.action_cursor(1)

    def on_mouse_scroll_up(self) -> None:
        """The wheel moves the cursor."""
        self.action_cursor(-1)

    def verdict_for(self, node: str) -> Verdict:
        """The node's verdict from the readings shown."""
        b = self.bands[node]
        value = self.values.get(node)
        return verdict(b.expected, b.low, b.high, value, node in self.values, self.plausible)

    def show(self, values: dict[str, float | None]) -> None:
        """Show the readings (node → volts, None for over range)."""
        self.values = dict(values)
        self.refresh()

    # --- drawing -------------------------------------------------------------------------

    def _band(self, node: str) -> str:
        return band_text(self.bands[node].low, self.bands[node].high)

    def _expected(self, node: str) -> str:
        return f"{volts_text(self.bands[node].expected)} ({self._band(node)})"

    def _columns(self) -> list[tuple[str, int]]:
        cols = [("Node", 6)]
        if self.wide:
            cols += [("TP", self.tp_width + 1), ("Expected (band) V", self.expected_width)]
        else:
            cols += [("Band V", self.band_width)]
        cols += [("Read V", 8), ("Δ V", 13 if self.wide else 6), ("Verdict", 12)]
        return cols

    def _row(self, node: str, chosen: bool) -> Content:
        v = self.verdict_for(node)
        style = STYLE[v.state]
        read = volts_text(self.values[node]) if node in self.values else "—"
        word = v.state if self.wide else SHORT[v.state]
        cells: list[tuple[str, str]] = [(("▶" if chosen else " ") + node, "bold")]
        if self.wide:
            cells += [(self.labels.get(node, ""), "$text-muted"), (self._expected(node), "")]
        else:
            cells.append((self._band(node), ""))
        cells += [(read, style), (deviation_text(v, percent=self.wide), style)]
        cells.append((f"{v.symbol} {word}", style))
        parts = []
        for (text, cell_style), (_, width) in zip(cells, self._columns(), strict=True):
            parts.append(Content.styled(text[: width - 1].ljust(width), cell_style))
        line = Content("").join(parts)
        return line.stylize("reverse") if chosen else line

    def render(self) -> Content:
        """Header and the rows in view."""
        header = Content.styled(
            "".join(
                f" {t}".ljust(w) if i == 0 else t.ljust(w)
                for i, (t, w) in enumerate(self._columns())
            ),
            "bold $text-primary",
        )
        rows = self.nodes[self.top : self.top + self._rows_in_view()]
        lines = [header] + [self._row(n, n == self.selected_node) for n in rows]
        return Content("\n").join(lines)
