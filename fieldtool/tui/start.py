"""The start screen: choose the profile, the board serial (past boards shown), and the meter.

It posts ``Chosen`` with the ``SessionRequest`` for the app to open.
"""

from __future__ import annotations

from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.screen import Screen
from textual.widgets import (
    Button,
    Footer,
    Input,
    Label,
    OptionList,
    RadioButton,
    RadioSet,
    Select,
    Static,
)
from textual.widgets.option_list import Option

from fieldtool.core import history as hist
from fieldtool.core.circuit.library import ProfileEntry, available
from fieldtool.core.errors import FieldtoolError, InputError, shown
from fieldtool.core.hazard import SAFETY_WARNING
from fieldtool.core.history.sessions import group_sessions, open_session
from fieldtool.core.names import technician_problem
from fieldtool.core.words import count
from fieldtool.tui.config import AppConfig, SessionRequest
from fieldtool.tui.dialogs import ErrorDialog
from fieldtool.tui.history import HistoryScreen
from fieldtool.tui.meter_strip import MeterChoice
from fieldtool.tui.palette import Commands

METER_KINDS = ("typed", "port", "simulated")


def list_profiles(folder: Path | None) -> list[tuple[ProfileEntry, str]]:
    """(entry, one-line description) of every profile: your folder's, then the shipped ones."""
    found = []
    for entry in available(folder):
        try:
            p = entry.load()
        except FieldtoolError as exc:
            found.append((entry, f"{entry.name}: cannot be used ({exc.title.lower()})"))
            continue
        text = f"{p.name}: {p.description}" if p.description else p.name
        found.append((entry, text if entry.shipped else f"{text} (your folder)"))
    return found


def past_boards(logs_dir: Path, profile_name: str) -> list[str]:
    """Serials with a history under this profile, newest change first."""
    folder = Path(logs_dir) / profile_name
    if not folder.is_dir():
        return []
    files = [f for f in folder.glob("*.jsonl") if f.stat().st_size > 0]  # empty: no history
    files.sort(key=lambda f: f.stat().st_mtime, reverse=True)
    return [f.stem for f in files]


def board_summary(logs_dir: Path, serial: str) -> str:
    """A line about a board's past: sessions, last outcome, an unfinished session."""
    try:
        h = hist.read_board(logs_dir, serial)
    except hist.NotFoundError:
        return f"{serial}: new board, no history yet."
    except FieldtoolError as exc:
        return f"{serial}: history unreadable ({exc.message})"
    sessions = [s for s in group_sessions(h.events) if s.id is not None]
    outcomes = [s.outcome for s in sessions if s.outcome]
    last = f", last outcome {outcomes[-1]}" if outcomes else ""
    unfinished = open_session(sessions) is not None
    open_note = "; last session unfinished (you can resume it)" if unfinished else ""
    damaged = f"; {count(len(h.damaged), 'damaged line')}" if h.damaged else ""
    return f"{serial}: {count(len(sessions), 'session')}{last}{open_note}{damaged}."


class MarkedRadioButton(RadioButton):
    """A radio button whose mark says by its shape whether it is chosen (● or ○), so the
    choice reads without colour."""

    @property
    def BUTTON_INNER(self) -> str:  # noqa: N802 (the name Textual's ToggleButton draws with)
        return "●" if self.value else "○"


class StartScreen(Commands, Screen):
    """Pick what to work on."""

    # F2, not ctrl+r: in many shells ctrl+r is reverse search, and here a field has the focus.
    BINDINGS = [Binding("ctrl+s", "start", "Start"), Binding("f2", "board_history", "History")]
    PALETTE = (("Start a session", "Open the board chosen on the start screen", "start"),)

    class Chosen(Message):
        """The technician chose a board to work on."""

        def __init__(self, request: SessionRequest) -> None:
            super().__init__()
            self.request = request

    def __init__(self, config: AppConfig) -> None:
        super().__init__()
        self.config = config
        self.profiles = list_profiles(config.profiles_dir)

    def compose(self) -> ComposeResult:
        """Profile list, serial and past boards, meter choice, start button."""
        yield Label("fieldtool · choose a board", id="start-title")
        with Horizontal(id="start-columns"):
            with Vertical(id="start-left"):
                yield Label("Board profile")
                yield OptionList(
                    *[Option(text, id=str(i)) for i, (_, text) in enumerate(self.profiles)],
                    id="profiles",
                )
                yield Input(
                    placeholder="…or a path to a profile .toml", id="profile-path", compact=True
                )
                yield Label("Technician")
                yield Input(
                    self.config.technician,
                    placeholder="your name or initials",
                    id="technician",
                    compact=True,
                )
            with Vertical(id="start-right"):
                yield Label("Board serial")
                yield Input(placeholder="e.g. TG-0042", id="serial", compact=True)
                yield OptionList(id="boards")
                yield Static("", id="board-summary")
                yield Label("Meter")
                with RadioSet(id="meter-kind", compact=True):
                    yield MarkedRadioButton("typed readings", value=True)
                    yield MarkedRadioButton("meter on a port")
                    yield MarkedRadioButton("simulated meter (healthy board)")
                yield Select([], prompt="serial port…", id="port", compact=True)
                yield Input(
                    placeholder="…or a URL: socket://host:port, loop://",
                    id="port-url",
                    compact=True,
                )
        with Horizontal(id="start-buttons"):
            yield Button("Start (ctrl+s)", id="start", variant="primary")
            yield Static(SAFETY_WARNING, classes="caution")
        yield Footer()

    def on_mount(self) -> None:
        """Select the first profile and look for serial ports."""
        if self.profiles:
            self.query_one("#profiles", OptionList).highlighted = 0
        self._scan_ports()

    @work(thread=True, exclusive=True, group="ports", exit_on_error=False)
    def _scan_ports(self) -> None:
        from serial.tools import list_ports

        try:
            ports = [(f"{p.device} {p.description}", p.device) for p in list_ports.comports()]
        except OSError:
            ports = []
        self.app.call_from_thread(self.query_one("#port", Select).set_options, ports)

    # --- what is chosen ------------------------------------------------------------------

    def chosen_entry(self) -> ProfileEntry | None:
        """The profile path typed, else the one highlighted in the list."""
        typed = self.query_one("#profile-path", Input).value.strip()
        if typed:
            path = Path(typed).expanduser()
            return ProfileEntry(path.stem, str(path), shipped=False)
        options = self.query_one("#profiles", OptionList)
        if options.highlighted is None:
            return None
        return self.profiles[int(options.get_option_at_index(options.highlighted).id)][0]

    def meter_choice(self, profile) -> MeterChoice:
        """The meter as chosen; a port is required for a meter on a port."""
        kind = METER_KINDS[self.query_one("#meter-kind", RadioSet).pressed_index]
        settings = self.config.settings
        if kind != "port":
            return MeterChoice(kind=kind, settings=settings)
        url = self.query_one("#port-url", Input).value.strip()
        port = self.query_one("#port", Select).value
        name = url or ("" if port is Select.NULL else str(port))
        if not name:
            raise InputError("no port chosen; pick one from the list or type a device or URL")
        return MeterChoice(kind="port", port=name, settings=settings)

    @on(OptionList.OptionSelected, "#profiles")
    def _profile_picked(self) -> None:
        # the board's serial is what a technician types next, though it sits in the other column
        self.query_one("#serial", Input).focus()

    @on(OptionList.OptionHighlighted, "#profiles")
    def _profile_changed(self) -> None:
        entry = self.chosen_entry()
        boards = self.query_one("#boards", OptionList)
        boards.clear_options()
        if entry is None:
            return
        for serial in past_boards(self.config.logs_dir, entry.name):
            boards.add_option(Option(serial, id=serial))

    @on(OptionList.OptionSelected, "#boards")
    def _board_picked(self, event: OptionList.OptionSelected) -> None:
        self.query_one("#serial", Input).value = str(event.option.id)
        self.query_one("#serial", Input).focus()

    @on(Input.Changed, "#serial")
    def _serial_changed(self, event: Input.Changed) -> None:
        serial = event.value.strip()
        text = ""
        if serial:
            try:
                text = board_summary(self.config.logs_dir, hist.check_name(serial))
            except FieldtoolError as exc:
                text = exc.message
        self.query_one("#board-summary", Static).update(text)

    @on(Input.Submitted, "#serial")
    @on(Button.Pressed, "#start")
    def _start_pressed(self) -> None:
        self.action_start()

    def action_start(self) -> None:
        """Open the chosen board."""
        try:
            entry = self.chosen_entry()
            if entry is None:
                raise InputError("no profile chosen; pick one from the list or type a path")
            profile = entry.load()
            serial = hist.check_name(self.query_one("#serial", Input).value.strip())
            technician = self.query_one("#technician", Input).value.strip()
            problem = technician_problem(technician)
            if problem:
                raise InputError(f"technician {shown(technician)} {problem}")
            request = SessionRequest(
                profile, serial, self.meter_choice(profile), technician=technician
            )
        except FieldtoolError as exc:
            self.app.push_screen(ErrorDialog(exc))
            return
        self.post_message(self.Chosen(request))

    def action_board_history(self) -> None:
        """The typed board's history."""
        serial = self.query_one("#serial", Input).value.strip()
        try:
            screen = HistoryScreen(self.config.logs_dir, hist.check_name(serial, existing=True))
        except FieldtoolError as exc:
            self.app.push_screen(ErrorDialog(exc))
            return
        self.app.push_screen(screen)
