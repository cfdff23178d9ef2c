"""History screens: one board's timeline, and the failure counts of a board type."""

from __future__ import annotations

from pathlib import Path

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Label, Static

from fieldtool.core import history as hist
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.history.fleet import confirmed_failures
from fieldtool.core.history.sessions import group_sessions
from fieldtool.core.measurement import DC
from fieldtool.core.words import conditions_words, count
from fieldtool.tui.view import volts_text


def event_words(record: hist.Record) -> str:
    """One line about a stored record."""
    e = record.event
    if e is None:
        if record.newer_schema:
            return "from a newer fieldtool, kept as is"
        return "unreadable by this version, kept as is"
    if isinstance(e, hist.SessionOpened):
        who = f" by {e.technician}" if e.technician else ""
        return f"session opened{who} (fieldtool {e.tool_version})"
    if isinstance(e, hist.Reading):  # verification included
        m = e.measurement
        what = ("" if m.quantity == DC else f" {m.quantity.words}") + conditions_words(m.conditions)
        value = "OL" if m.value is None else f"{volts_text(m.value)} {m.unit}"
        spread = f" ±{volts_text(m.spread / 2, 2)}" if m.spread else ""
        source = f"{m.source}{'' if m.settled else hist.UNSETTLED}"
        return f"{m.at}{what} = {value}{spread} ({source})"
    if isinstance(e, hist.DiagnosisSnapshot):
        top = ", ".join(
            " ".join(w for w in (s.designator, s.mode, f"{s.probability:.0%}") if w)
            for s in e.suspects[:3]
        )
        return f"suspects: {top}"
    if isinstance(e, hist.Action):
        parts = [f"{e.designator} {e.done}"]
        if e.mode:
            parts.append(f"found {e.mode}")
        if e.part_used:
            parts.append(f"with {e.part_used}")
        if e.note:
            parts.append(f"“{e.note}”")
        return ", ".join(parts)
    if isinstance(e, hist.SessionClosed):
        return f"session closed: {e.outcome}"
    return record.kind


class HistoryScreen(Screen):
    """A board's timeline, oldest first, damaged lines reported."""

    BINDINGS = [Binding("escape,h", "app.pop_screen", "Back")]

    def __init__(self, logs_dir: Path, serial: str) -> None:
        super().__init__()
        self.logs_dir = Path(logs_dir)
        self.serial = serial

    def compose(self) -> ComposeResult:
        """Title, timeline table, note line."""
        yield Label(f"History of board {self.serial}", classes="screen-title")
        yield DataTable(id="timeline", cursor_type="row", zebra_stripes=True)
        yield Static("Reading the history…", id="history-note")
        yield Footer()

    def on_mount(self) -> None:
        """Read the files in a worker; the table's columns come with the rows."""
        self._read()

    @work(thread=True, exclusive=True, exit_on_error=False)
    def _read(self) -> None:
        try:
            h = hist.read_board(self.logs_dir, self.serial)
        except hist.NotFoundError:
            self.app.call_from_thread(self._show, None, f"No history yet for {self.serial}.")
            return
        except FieldtoolError as exc:
            self.app.call_from_thread(self._show, None, f"{exc.title}: {exc.message}")
            return
        self.app.call_from_thread(self._show, h, "")

    def _show(self, h: hist.BoardHistory | None, note: str) -> None:
        table = self.query_one(DataTable)
        rows = (
            []
            if h is None
            else [(r.time[:19].replace("T", " "), r.kind, event_words(r)) for r in h.events]
        )
        # Widths set from the rows themselves, so the columns never wait on a later refresh.
        heads = ("When (UTC)", "What", "Details")
        for i, head in enumerate(heads):
            width = max([len(head), *(len(row[i]) for row in rows)])
            table.add_column(head, width=min(width, 200))
        if h is not None:
            for row in rows:
                table.add_row(*row)
            sessions = sum(s.id is not None for s in group_sessions(h.events))
            note = f"{count(len(h.events), 'record')}, {count(sessions, 'session')}."
            if h.damaged:
                note += f" {count(len(h.damaged), 'damaged line')} left on disk untouched"
                note += f" (first: {h.damaged[0].path}:{h.damaged[0].line}, {h.damaged[0].reason})."
            table.move_cursor(row=max(0, table.row_count - 1))
        self.query_one("#history-note", Static).update(note)
        table.focus()


class FleetScreen(Screen):
    """Confirmed failures by designator and mode across the boards of one profile."""

    BINDINGS = [Binding("escape,f", "app.pop_screen", "Back")]

    def __init__(self, logs_dir: Path, profile_name: str) -> None:
        super().__init__()
        self.logs_dir = Path(logs_dir)
        self.profile_name = profile_name

    def compose(self) -> ComposeResult:
        """Title, counts table, note line."""
        yield Label(f"Fleet: {self.profile_name}", classes="screen-title")
        yield DataTable(id="failures", cursor_type="row", zebra_stripes=True)
        yield Static("Counting…", id="fleet-note")
        yield Footer()

    def on_mount(self) -> None:
        """Columns, then count in a worker."""
        self.query_one(DataTable).add_columns("Part", "Mode", "Confirmed failures")
        self._count()

    @work(thread=True, exclusive=True, exit_on_error=False)
    def _count(self) -> None:
        try:
            counts = confirmed_failures(self.logs_dir, self.profile_name)
        except FieldtoolError as exc:
            self.app.call_from_thread(self._show, {}, f"{exc.title}: {exc.message}")
            return
        self.app.call_from_thread(self._show, counts, "")

    def _show(self, counts: dict[tuple[str, str], int], note: str) -> None:
        table = self.query_one(DataTable)
        ranked = sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))
        for (designator, mode), n in ranked:
            table.add_row(designator, mode, str(n))
        if not note:
            total = sum(counts.values())
            note = (
                f"{count(total, 'confirmed failure')} ({count(len(counts), 'part/mode pair')}): "
                "repairs in sessions "
                "closed fixed. They become this board type's diagnosis priors."
                if counts
                else "No confirmed failures yet for this board type."
            )
        self.query_one("#fleet-note", Static).update(note)
        table.focus()
