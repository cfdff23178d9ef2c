"""The fieldtool terminal app: start, load, probe, repair, verify; built by ``make_app``.

The flow runs on what screens hand back: the start screen posts ``StartScreen.Chosen``, the
loading worker ``LoadingScreen.Loaded`` (or ``Failed``), the resume dialog returns its answer,
and the probing screen posts ``ProbingScreen.SessionEnded``. The app holds the history writer
and shows its backlog in ``unsaved_count``, a reactive the screens watch.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

from textual.app import App, SystemCommand
from textual.binding import Binding
from textual.message import Message
from textual.reactive import reactive
from textual.screen import Screen
from textual.worker import Worker, WorkerState

from fieldtool.core.errors import FieldtoolError
from fieldtool.core.hazard import SAFETY_WARNING
from fieldtool.core.history import Action, Reading
from fieldtool.core.history.sessions import Session
from fieldtool.core.session import BoardSession
from fieldtool.core.words import count
from fieldtool.meters.settings import MeterSettings
from fieldtool.store import StoreAddress
from fieldtool.tui.config import AppConfig, SessionRequest
from fieldtool.tui.dialogs import (
    ActionDialog,
    ErrorDialog,
    NoticeDialog,
    OutcomeDialog,
    ResumeDialog,
)
from fieldtool.tui.help import TYPED, HelpScreen, key_table
from fieldtool.tui.history import FleetScreen, HistoryScreen
from fieldtool.tui.loading import LoadedBoard, LoadingScreen
from fieldtool.tui.palette import Commands
from fieldtool.tui.probing import ProbingScreen
from fieldtool.tui.start import StartScreen
from fieldtool.tui.writer import HistoryWriter

PALETTE_WORDS = "Command palette: the main actions by name"

__all__ = ["AppConfig", "FieldtoolApp", "SessionRequest", "help_text", "make_app"]


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

    unsaved_count: reactive[int] = reactive(0)  # events handed to the writer, not saved yet

    def __init__(self, config: AppConfig, request: SessionRequest | None = None) -> None:
        super().__init__()
        self.config = config
        self.request = request
        self.writer: HistoryWriter | None = None
        self.save_error_shown = False
        self.writer_left_unsaved = 0
        self.rescued_to: Path | None = None

    # --- flow ----------------------------------------------------------------------------

    def on_mount(self) -> None:
        """Open on the start screen, or straight on a board."""
        if self.request is not None:
            self.push_screen(LoadingScreen(self.request, self.config))
        else:
            self.push_screen(StartScreen(self.config))

    def on_start_screen_chosen(self, message: StartScreen.Chosen) -> None:
        """Load the chosen board's fault dictionary and history."""
        self.switch_screen(LoadingScreen(message.request, self.config))

    def on_loading_screen_failed(self, message: LoadingScreen.Failed) -> None:
        """The board could not be opened: the start screen, with the error over it."""
        self.switch_screen(StartScreen(self.config))
        self.push_screen(ErrorDialog(message.error))

    def on_loading_screen_loaded(self, message: LoadingScreen.Loaded) -> None:
        """The board is ready: ask about an unfinished session if there is one."""
        board = message.board
        unfinished, resume = board.unfinished, board.request.resume
        if unfinished is None or resume is not None:
            self.open_session(board, unfinished if resume else None)
            return
        records = unfinished.records
        # Only what resuming brings back: a record this version cannot read is not counted.
        readings = sum(isinstance(r.event, Reading) for r in records)
        actions = sum(isinstance(r.event, Action) for r in records)
        opened = unfinished.start[:16].replace("T", " ")
        dialog = ResumeDialog(board.request.serial, opened, readings, actions)

        def chosen(answer: bool | None) -> None:
            self.open_session(board, unfinished if answer else None)

        self.push_screen(dialog, chosen)

    def open_session(self, board: LoadedBoard, resume_from: Session | None) -> None:
        """Create the session (new or resumed) and show the probing screen."""
        request = board.request
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
            board.dictionary,
            self.writer.submit,
            priors=board.priors,
            technician=request.technician or self.config.technician,
        )
        if resume_from is not None:
            restored = session.resume(resume_from)
            self.notify(f"Resumed: {count(restored, 'reading')} restored.", timeout=4)
        else:
            session.open()
        screen = ProbingScreen(session, request.meter, self.config.logs_dir, request.demo_fault)
        self.switch_screen(screen)

    def on_probing_screen_session_ended(self, message: ProbingScreen.SessionEnded) -> None:
        """The outcome is saved: back to the start screen."""
        if self.writer is not None:
            self.writer.drain()
        self.switch_screen(StartScreen(self.config))
        if message.reveal:
            self.push_screen(NoticeDialog("Demo: the hidden fault", message.reveal))

    def close_writer(self) -> None:
        """Write what is queued and stop the writer; what cannot be saved goes to a rescue file."""
        if self.writer is None:
            return
        if not self.writer.close():
            self.writer_left_unsaved, self.rescued_to = self.writer.rescue()
        self.writer = None

    # --- history writer messages ---------------------------------------------------------

    def on_history_saved(self, message: HistorySaved) -> None:
        """An event reached the disk."""
        self.save_error_shown = False
        self.unsaved_count = len(self.writer.unsaved) if self.writer else 0

    def on_history_failed(self, message: HistoryFailed) -> None:
        """Say once that saving fails; the events stay queued in memory."""
        self.unsaved_count = len(self.writer.unsaved) if self.writer else 0
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
        self.push_screen(ErrorDialog(error))

    # --- app-wide actions ----------------------------------------------------------------

    def action_help(self) -> None:
        """Every key, for the screen in front."""
        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen(help_text()))

    def action_history(self, serial: str) -> None:
        """A board's timeline."""
        self.push_screen(HistoryScreen(self.config.logs_dir, serial))

    def action_fleet(self, profile_name: str) -> None:
        """A board type's confirmed failures."""
        self.push_screen(FleetScreen(self.config.logs_dir, profile_name))

    async def action_quit(self) -> None:
        """Quit at once: every reading is already on its way to disk; wait for it to land."""
        self.close_writer()
        self.exit()

    def on_unmount(self) -> None:
        """Never leave events unwritten."""
        self.close_writer()

    def get_system_commands(self, screen: Screen) -> Iterable[SystemCommand]:
        """The main actions in the command palette: the app's, then the screen's own.

        The framework's own key panel ("Keys") is left out: the help screen lists every key of
        every screen, and two entries about keys would leave the technician guessing.
        """
        panel = (self.action_show_help_panel, self.action_hide_help_panel)
        for command in super().get_system_commands(screen):
            if command.callback not in panel:
                yield command
        yield SystemCommand("Help: every key", "List every key and what it does", self.action_help)
        if isinstance(screen, Commands):
            for title, help_words, action in screen.PALETTE:
                yield SystemCommand(title, help_words, _runner(screen, action))


def _runner(screen: Screen, action: str):
    async def run() -> None:
        await screen.run_action(action)

    return run


def help_text() -> str:
    """Every screen's keys, the typed-entry syntax and the standing caution."""
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
