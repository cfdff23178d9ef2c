"""The fieldtool terminal app: start, load, probe, repair, verify; built by ``make_app``."""

from __future__ import annotations

import os
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

from textual.app import App, SystemCommand
from textual.binding import Binding
from textual.message import Message
from textual.screen import Screen
from textual.worker import Worker, WorkerState

from fieldtool.core import history as hist
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis.dictionary import FaultDictionary
from fieldtool.core.diagnosis.faults import Fault
from fieldtool.core.errors import FieldtoolError
from fieldtool.meters.settings import MeterSettings
from fieldtool.store import StoreAddress
from fieldtool.tui.dialogs import ErrorDialog, NoticeDialog, ResumeDialog
from fieldtool.tui.meter_strip import MeterChoice
from fieldtool.tui.session import BoardSession
from fieldtool.tui.writer import HistoryWriter

PALETTE_WORDS = "Command palette: the main actions by name"


@dataclass(frozen=True)
class AppConfig:
    """Where things live and who is working; passed in, never read from the environment here."""

    logs_dir: Path
    profiles_dir: Path | None = None  # your own profiles; the shipped ones are always listed
    cache_dir: Path | None = None
    technician: str = ""
    settings: MeterSettings = field(default_factory=MeterSettings)
    rescue_dir: Path | None = (
        None  # where unsaveable events go at quit (default ~/fieldtool-rescue)
    )
    store: StoreAddress | None = None  # the fleet store for the priors (None: files only)


@dataclass(frozen=True)
class SessionRequest:
    """A board to work on: its profile, serial, meter, and whether to resume (None: ask)."""

    profile: Profile
    serial: str
    meter: MeterChoice
    resume: bool | None = None
    demo_fault: Fault | None = None


class HistorySaved(Message):
    """The writer saved an event (posted from the writer's thread)."""


class HistoryFailed(Message):
    """The writer could not save an event; it is kept and retried."""

    def __init__(self, error: FieldtoolError) -> None:
        super().__init__()
        self.error = error


class FieldtoolApp(App):
    """Keyboard-driven probing of a voltage multiplier, one board at a time."""

    CSS_PATH = "fieldtool.tcss"
    TITLE = "fieldtool"
    BINDINGS = [
        Binding("question_mark,f1", "help", "Help", key_display="?", tooltip="Every key"),
        Binding("q", "quit", "Quit", tooltip="Quit at once; every reading is already saved"),
        Binding("ctrl+p", "command_palette", "Commands", show=False, tooltip=PALETTE_WORDS),
    ]

    def __init__(self, config: AppConfig, request: SessionRequest | None = None) -> None:
        super().__init__()
        self.config = config
        self.request = request
        self.writer: HistoryWriter | None = None
        self.unsaved_count = 0
        self.save_error_shown = False
        self.writer_left_unsaved = 0
        self.rescued_to: Path | None = None

    # --- flow ----------------------------------------------------------------------------

    def on_mount(self) -> None:
        """Open on the start screen, or straight on a board."""
        from fieldtool.tui.start import StartScreen

        if self.request is not None:
            self.begin(self.request)  # the start screen comes after the session, if at all
        else:
            self.push_screen(StartScreen(self.config))

    def begin(self, request: SessionRequest) -> None:
        """Load the board's fault dictionary and history, then open its session."""
        from fieldtool.tui.loading import LoadingScreen

        self.push_screen(LoadingScreen(request, self.config))

    def loaded(
        self,
        request: SessionRequest,
        dictionary: FaultDictionary,
        priors,
        unfinished: hist.BoardHistory | None,
    ) -> None:
        """The dictionary is ready: ask about an unfinished session if there is one."""
        if unfinished is None or request.resume is False:
            self.open_session(request, dictionary, priors, None)
            return
        if request.resume:
            self.open_session(request, dictionary, priors, unfinished)
            return
        opened = next(r for r in reversed(unfinished.events) if r.kind == "session-opened")
        after = [r for r in unfinished.events if r.time >= opened.time]
        readings = sum(r.kind in ("reading", "verification") for r in after)
        actions = sum(r.kind == "action" for r in after)
        dialog = ResumeDialog(request.serial, opened.time[:16].replace("T", " "), readings, actions)

        def chosen(resume: bool | None) -> None:
            self.open_session(request, dictionary, priors, unfinished if resume else None)

        self.push_screen(dialog, chosen)

    def open_session(self, request, dictionary, priors, resume_from) -> None:
        """Create the session (new or resumed) and show the probing screen."""
        from fieldtool.tui.probing import ProbingScreen

        self.close_writer()
        self.writer = HistoryWriter(
            self.config.logs_dir,
            request.profile.name,
            request.serial,
            on_saved=lambda event: self.post_message(HistorySaved()),
            on_error=lambda exc, event: self.post_message(HistoryFailed(exc)),
            rescue_dirs=(self.config.rescue_dir,) if self.config.rescue_dir else (),
        )
        session = BoardSession(
            request.profile,
            request.serial,
            dictionary,
            self.writer.submit,
            priors=priors,
            technician=self.config.technician,
        )
        if resume_from is not None:
            restored = session.resume(resume_from)
            self.notify(f"Resumed: {restored} readings restored.", timeout=4)
        else:
            session.open()
        screen = ProbingScreen(session, request.meter, request.demo_fault)
        self.switch_screen(screen)

    def session_finished(self, reveal: str | None) -> None:
        """The outcome is saved: back to the start screen."""
        from fieldtool.tui.start import StartScreen

        if self.writer is not None:
            self.writer.drain()
        self.switch_screen(StartScreen(self.config))
        if reveal:
            self.push_screen(NoticeDialog("Demo: the hidden fault", reveal))

    def close_writer(self) -> None:
        """Write what is queued and stop the writer; what cannot be saved goes to a rescue file."""
        if self.writer is None:
            return
        if not self.writer.close():
            self.writer_left_unsaved, self.rescued_to = self.writer.rescue()
        self.writer = None

    # --- history writer messages ---------------------------------------------------------

    def _writer_state(self) -> None:
        self.unsaved_count = len(self.writer.unsaved) if self.writer else 0
        refresh = getattr(self.screen, "refresh_title", None)
        if refresh is not None:
            refresh()

    def on_history_saved(self, message: HistorySaved) -> None:
        """An event reached the disk."""
        self.save_error_shown = False
        self._writer_state()

    def on_history_failed(self, message: HistoryFailed) -> None:
        """Say once that saving fails; the events stay queued in memory."""
        self._writer_state()
        if not self.save_error_shown:
            self.save_error_shown = True
            self.push_screen(ErrorDialog(message.error))

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A worker that failed shows its error in a dialog, never a traceback."""
        if event.state != WorkerState.ERROR:
            return
        error = event.worker.error
        if not isinstance(error, FieldtoolError):
            error = FieldtoolError(
                f"{type(error).__name__}: {error}. Readings already taken are saved; "
                "please report this with the board's profile.",
                title="Unexpected error",
            )
        self.show_error(error)

    # --- app-wide actions ----------------------------------------------------------------

    def loading_failed(self, error: FieldtoolError) -> None:
        """The board could not be opened: the start screen, with the error over it."""
        from fieldtool.tui.start import StartScreen

        self.switch_screen(StartScreen(self.config))
        self.show_error(error)

    def show_error(self, error: FieldtoolError) -> None:
        """Show an error in a dialog."""
        self.push_screen(ErrorDialog(error))

    def action_help(self) -> None:
        """Every key, for the screen in front."""
        from fieldtool.tui.help import HelpScreen

        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen())

    def action_history(self, serial: str) -> None:
        """A board's timeline."""
        from fieldtool.tui.history import HistoryScreen

        self.push_screen(HistoryScreen(self.config.logs_dir, serial))

    def action_fleet(self, profile_name: str) -> None:
        """A board type's confirmed failures."""
        from fieldtool.tui.history import FleetScreen

        self.push_screen(FleetScreen(self.config.logs_dir, profile_name))

    async def action_quit(self) -> None:
        """Quit at once: every reading is already on its way to disk; wait for it to land."""
        self.close_writer()
        self.exit()

    def on_unmount(self) -> None:
        """Never leave events unwritten."""
        self.close_writer()

    def get_system_commands(self, screen: Screen) -> Iterable[SystemCommand]:
        """The main actions in the command palette."""
        yield from super().get_system_commands(screen)
        yield SystemCommand("Help: every key", "List every key and what it does", self.action_help)
        for title, help_text, action in PALETTE:
            if hasattr(screen, f"action_{action}"):
                yield SystemCommand(title, help_text, _runner(screen, action))


PALETTE = (
    ("Jump to the next probe", "Select the node the diagnosis suggests", "next_probe"),
    ("Accept the settled reading", "Take the meter's settled value at this node", "accept"),
    ("Type a reading", "Enter a value by hand", "type_reading"),
    ("Record a repair", "Designator, what was done, part used, note", "repair"),
    ("Close the session", "Fixed, not fixed or escalated", "close_session"),
    ("Safety details", "Each capacitor's voltage and stored energy", "safety"),
    ("Board history", "This board's timeline", "history"),
    ("Fleet failures", "Confirmed failures on this board type", "fleet"),
    ("Reconnect the meter", "Open the meter's port again", "reconnect"),
    ("Start a session", "Open the board chosen on the start screen", "start"),
)


def _runner(screen: Screen, action: str):
    async def run() -> None:
        await screen.run_action(action)

    return run


def make_app(
    *,
    logs_dir: str | os.PathLike[str],
    request: SessionRequest | None = None,
    profiles_dir: str | os.PathLike[str] | None = None,
    cache_dir: str | os.PathLike[str] | None = None,
    technician: str = "",
    settings: MeterSettings | None = None,
    rescue_dir: str | os.PathLike[str] | None = None,
    store: StoreAddress | None = None,
) -> FieldtoolApp:
    """The app, shared by the CLI and the tests."""
    config = AppConfig(
        logs_dir=Path(logs_dir),
        profiles_dir=Path(profiles_dir) if profiles_dir else None,
        cache_dir=Path(cache_dir) if cache_dir else None,
        technician=technician,
        settings=settings or MeterSettings(),
        rescue_dir=Path(rescue_dir) if rescue_dir else None,
        store=store,
    )
    return FieldtoolApp(config, request)
