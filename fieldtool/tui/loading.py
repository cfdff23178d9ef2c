"""Loading a board: the fault dictionary (from cache, or built with progress), priors, history."""

from __future__ import annotations

from textual import work
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.screen import Screen
from textual.widgets import Footer, Label, ProgressBar, Static
from textual.worker import get_current_worker

from fieldtool.core.circuit.safety import CAUTION
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.priors import published_priors
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.history import HistoryError
from fieldtool.tui.session import choose_priors, unfinished_session


class LoadingScreen(Screen):
    """Shows progress while a worker prepares the board's session."""

    def __init__(self, request, config) -> None:
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
            yield Static(CAUTION, classes="caution")
        yield Footer()

    def on_mount(self) -> None:
        """Start the worker."""
        self.prepare()

    @work(thread=True, exclusive=True, exit_on_error=False)
    def prepare(self) -> None:
        """Dictionary, priors and unfinished history, off the UI thread."""
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
                self.app.call_from_thread(self._failed, exc)
            return
        # A history folder that cannot be read must not stop the probing: published priors,
        # no resume, and the writer says so (and keeps every reading) when it cannot save.
        try:
            priors = choose_priors(
                r.profile,
                dictionary,
                self.config.logs_dir,
                self.config.store,
                lambda text: self.app.call_from_thread(self._warn, f"Priors: {text}"),
            )
        except HistoryError as exc:
            priors = published_priors(r.profile, dictionary.hypotheses)
            self.app.call_from_thread(self._warn, f"Fleet counts not used: {exc.message}")
        try:
            unfinished = unfinished_session(self.config.logs_dir, r.serial)
        except HistoryError as exc:
            unfinished = None
            self.app.call_from_thread(self._warn, f"History not read: {exc.message}")
        if not worker.is_cancelled:
            self.app.call_from_thread(self.app.loaded, r, dictionary, priors, unfinished)

    def _progress(self, done: int, total: int) -> None:
        self.query_one("#loading-what", Static).update(
            f"Building the fault dictionary (first time for this profile): {done}/{total}"
        )
        self.query_one("#loading-bar", ProgressBar).update(total=total, progress=done)

    def _warn(self, text: str) -> None:
        self.app.notify(text, severity="warning", timeout=8)

    def _failed(self, error: FieldtoolError) -> None:
        self.app.loading_failed(error)
