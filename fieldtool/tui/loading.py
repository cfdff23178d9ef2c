"""Loading a board: the fault dictionary (from cache, or built with progress), priors, history.

A thread worker prepares everything and posts ``Loaded`` with a ``LoadedBoard`` (or
``Failed`` with the error) for the app to go on with.
"""

from __future__ import annotations

from dataclasses import dataclass

from textual import work
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Footer, Label, ProgressBar, Static
from textual.worker import get_current_worker

from fieldtool.core.diagnosis.dictionary import FaultDictionary
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.priors import Priors
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.hazard import SAFETY_WARNING
from fieldtool.core.history import HistoryError
from fieldtool.core.history.sessions import Session
from fieldtool.core.session import choose_priors, unfinished_session
from fieldtool.store.priors import store_failures
from fieldtool.tui.config import AppConfig, SessionRequest


@dataclass(frozen=True)
class LoadedBoard:
    """What a session on the requested board needs, ready to open."""

    request: SessionRequest
    dictionary: FaultDictionary
    priors: Priors
    unfinished: Session | None  # the board's latest session never closed, if any


class LoadingScreen(Screen):
    """Shows progress while a worker prepares the board's session."""

    class Loaded(Message):
        """The board is ready; ``board`` holds what its session needs."""

        def __init__(self, board: LoadedBoard) -> None:
            super().__init__()
            self.board = board

    class Failed(Message):
        """The board cannot be opened; ``error`` says why."""

        def __init__(self, error: FieldtoolError) -> None:
            super().__init__()
            self.error = error

    def __init__(self, request: SessionRequest, config: AppConfig) -> None:
        super().__init__()
        self.request = request
        self.config = config

    def compose(self) -> ComposeResult:
        """What is being loaded, a progress bar, and the standing caution."""
        p = self.request.profile
        with Vertical(id="loading"):
            yield Label(f"{p.name} · board {self.request.serial}", classes="dialog-title")
            yield Static("Loading the fault dictionary…", id="loading-what")
            yield ProgressBar(id="loading-bar", show_eta=False)
            yield Static(SAFETY_WARNING, classes="caution")
        yield Footer()

    def on_mount(self) -> None:
        """Start the worker."""
        self.prepare()

    @work(thread=True, exclusive=True, exit_on_error=False)
    def prepare(self) -> None:
        """Dictionary, priors and unfinished session, off the UI thread."""
        worker = get_current_worker()
        r = self.request

        def progress(done: int, total: int) -> None:
            if not worker.is_cancelled:
                self.app.call_from_thread(self._progress, done, total)

        try:
            dictionary = load_or_build(
                r.profile, cache_dir=self.config.cache_dir, progress=progress
            )
        except FieldtoolError as exc:
            if not worker.is_cancelled:
                self.post_message(self.Failed(exc))
            return
        # A history folder that cannot be read must not stop the probing: published priors,
        # no resume, and the writer says so (and keeps every reading) when it cannot save.
        try:
            failures = store_failures(
                self.config.store,
                self.config.logs_dir,
                lambda text: self.app.call_from_thread(self._warn, f"Priors: {text}"),
            )
            priors = choose_priors(r.profile, dictionary.hypotheses, failures)
        except HistoryError as exc:
            priors = choose_priors(r.profile, dictionary.hypotheses)
            self.app.call_from_thread(self._warn, f"Fleet counts not used: {exc.message}")
        try:
            unfinished = unfinished_session(self.config.logs_dir, r.serial)
        except HistoryError as exc:
            unfinished = None
            self.app.call_from_thread(self._warn, f"History not read: {exc.message}")
        if not worker.is_cancelled:
            self.post_message(self.Loaded(LoadedBoard(r, dictionary, priors, unfinished)))

    def _progress(self, done: int, total: int) -> None:
        self.query_one("#loading-what", Static).update(
            f"Building the fault dictionary (first time for this profile): {done}/{total}"
        )
        self.query_one("#loading-bar", ProgressBar).update(total=total, progress=done)

    def _warn(self, text: str) -> None:
        self.app.notify(text, severity="warning", timeout=8)
