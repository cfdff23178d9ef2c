"""The multiplier drawn in text: stages left to right, designators, nodes, test points.

``ladder_cells`` turns a profile into a row of cells (a node with the capacitors hanging from it,
then the diode to the next node); ``LadderView`` draws them with each node's state symbol and
each part's suspicion rank, wrapping onto more rows when the widget is tall enough and
otherwise showing the window of stages around the selected node.
"""

from __future__ import annotations

from dataclasses import dataclass

from textual.content import Content
from textual.reactive import reactive
from textual.widget import Widget

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.circuit.topologies.base import GROUND
from fieldtool.tui.view import STYLE, SYMBOL, UNREAD

RANK_MARK = "¹²³"  # the top three suspects carry their rank, not only a colour
LINES_PER_ROW = 4  # capacitors up, the chain, capacitors down, test points


@dataclass(frozen=True)
class Cell:
    """One node and the diode that leaves it toward the output (None after the last node)."""

    node: str  # node name; "GND" where an ac-ladder's chain starts at ground
    probe: bool  # the technician can probe it
    label: str  # test point
    up: str | None  # capacitor (board designator) from this node toward the drive side
    up_ref: str | None  # its default designator, for suspicion look-ups
    down: str | None
    down_ref: str | None
    diode: str | None
    diode_ref: str | None


def ladder_cells(profile: Profile) -> tuple[Cell, ...]:
    """The profile's ladder as cells in chain order (diode k leaves node k)."""
    chain = topology_of(profile).chain(profile.stages)
    cells = []
    for i, link in enumerate(chain):
        node, up, down = link.node, link.up, link.down
        diode = f"D{i + 1}" if i + 1 < len(chain) else None
        cells.append(
            Cell(
                node=node,
                probe=node != GROUND,
                label=profile.labels.get(node, ""),
                up=display_name(profile, up) if up else None,
                up_ref=up,
                down=display_name(profile, down) if down else None,
                down_ref=down,
                diode=display_name(profile, diode) if diode else None,
                diode_ref=diode,
            )
        )
    return tuple(cells)


def legend(profile: Profile) -> str:
    """Where the capacitors drawn above and below the chain go."""
    return topology_of(profile).legend


MORE_LEFT, MORE_RIGHT = "«", "»"  # the ladder goes on past the edge of the view


class LadderView(Widget):
    """The ladder with node states, the selected node and the suspects marked."""

    selected: reactive[str | None] = reactive(None)
    states: reactive[dict[str, str]] = reactive(dict, always_update=True)
    ranks: reactive[dict[str, int]] = reactive(dict, always_update=True)  # default ref → 1..3

    def __init__(self, profile: Profile, **kwargs) -> None:
        super().__init__(**kwargs)
        self.profile = profile
        self.cells = ladder_cells(profile)
        self.arrow = "◀" if profile.polarity == "negative" else "▶"
        self.border_title = "Ladder"
        self.border_subtitle = legend(profile)

    def _part(self, text: str | None, ref: str | None, width: int) -> Content:
        if not text:
            return Content(" " * width)
        rank = self.ranks.get(ref or "", 0)
        mark = RANK_MARK[rank - 1] if rank else ""
        style = {1: "bold $text-error", 2: "bold $text-warning", 3: "$text-warning"}.get(rank, "")
        body = Content.styled(text + mark, style) if style else Content(text)
        return body.pad_right(max(0, width - len(text) - len(mark)))

    def _node(self, cell: Cell, width: int) -> Content:
        if not cell.probe:
            return Content("⏚" + cell.node[:0]).pad_right(width - 1)
        state = self.states.get(cell.node, UNREAD)
        chosen = cell.node == self.selected
        text = f"{'[' if chosen else ' '}{SYMBOL[state]}{cell.node}{']' if chosen else ' '}"
        style = STYLE[state] + (" reverse" if chosen else "")
        return Content.styled(text, style).pad_right(width - len(text))

    def _columns(self, cell: Cell) -> tuple[int, int]:
        node_w = max(len(cell.node) + 3, len(cell.label), len(cell.up or "") + 2)
        node_w = max(node_w, len(cell.down or "") + 2)
        diode_w = len(cell.diode) + 4 if cell.diode else 0
        return node_w, diode_w

    def _block(self, cell: Cell) -> list[Content]:
        """The four lines of one cell."""
        node_w, diode_w = self._columns(cell)
        up = self._part(cell.up and "↑" + cell.up, cell.up_ref, node_w)
        down = self._part(cell.down and "↓" + cell.down, cell.down_ref, node_w)
        label = Content.styled(cell.label.ljust(node_w), "$text-muted")
        chain = self._node(cell, node_w)
        if cell.diode:
            pad = Content(" " * diode_w)
            diode = Content("─") + self._part(cell.diode, cell.diode_ref, 0) + Content(self.arrow)
            diode = diode.pad_right(diode_w - len(diode.plain))
            return [up + pad, chain + diode, down + pad, label + pad]
        return [up, chain, down, label]

    def _visible(self, width: int, rows: int) -> list[list[int]]:
        """Cell indices for each drawn row: wrap if the rows suffice, else a window."""
        widths = [sum(self._columns(c)) for c in self.cells]
        lines: list[list[int]] = [[]]
        used = 0
        for i, w in enumerate(widths):
            if lines[-1] and used + w > width:
                lines.append([])
                used = 0
            lines[-1].append(i)
            used += w
        if len(lines) <= rows:
            return lines
        # One window around the selected node, one row.
        names = [c.node for c in self.cells]
        centre = names.index(self.selected) if self.selected in names else 0
        lo = hi = centre
        used = widths[centre]
        while True:
            grew = False
            if hi + 1 < len(widths) and used + widths[hi + 1] <= width - 2:
                hi += 1
                used += widths[hi]
                grew = True
            if lo > 0 and used + widths[lo - 1] <= width - 2:
                lo -= 1
                used += widths[lo]
                grew = True
            if not grew:
                return [list(range(lo, hi + 1))]

    def render(self) -> Content:
        """Draw the rows of cells that fit."""
        width = max(self.size.width, 20)
        rows = max(1, self.size.height // LINES_PER_ROW)
        layout = self._visible(width, rows)
        last = len(self.cells) - 1
        windowed = len(layout) == 1 and (layout[0][0] > 0 or layout[0][-1] < last)
        drawn: list[Content] = []
        for indices in layout:
            blocks = [self._block(self.cells[i]) for i in indices]
            for line in range(LINES_PER_ROW):
                row = Content("").join(b[line] for b in blocks)
                if windowed:  # « » say "more this way"; ▶ ◀ are the diodes
                    left = MORE_LEFT if line == 1 and indices[0] > 0 else " "
                    right = MORE_RIGHT if line == 1 and indices[-1] < last else ""
                    row = Content(left) + row + Content(right)
                drawn.append(row)
        return Content("\n").join(drawn)
