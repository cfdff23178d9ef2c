"""The history writer: saves events in order on its own thread so the screen never waits on disk.

Each event is appended (and fsynced) by ``core.history.append`` in the order it was handed
over. An event that cannot be saved (disk full, read-only folder) is kept in memory, reported
through ``on_error`` and written again, still in order, on the next ``retry`` or ``submit``;
``close`` waits for the queue to empty, so quitting loses nothing that could be written.
"""

from __future__ import annotations

import queue
import tempfile
import threading
from collections.abc import Callable
from pathlib import Path

from fieldtool.core import history as hist
from fieldtool.core.errors import FieldtoolError

_STOP = object()


class HistoryWriter:
    """Append one board's events to its history, in order, off the UI thread."""

    def __init__(
        self,
        logs_dir: Path,
        profile_name: str,
        serial: str,
        on_saved: Callable[[object], None] | None = None,
        on_error: Callable[[FieldtoolError, object], None] | None = None,
        rescue_dirs: tuple[Path, ...] = (),
    ) -> None:
        self.logs_dir = Path(logs_dir)
        self.profile_name = profile_name
        self.serial = hist.check_name(serial)
        self.on_saved = on_saved
        self.on_error = on_error
        self.rescue_dirs = rescue_dirs or (
            Path.home() / "fieldtool-rescue",
            Path(tempfile.gettempdir()) / "fieldtool-rescue",
        )
        self.saved = 0
        self.unsaved: list[tuple[object, str | None]] = []  # (event, session), oldest first
        self._queue: queue.Queue = queue.Queue()
        self._lock = threading.Lock()
        self._thread = threading.Thread(target=self._run, name="history-writer", daemon=True)
        self._thread.start()

    def submit(self, event: object, session: str | None = None) -> None:
        """Hand over one event of a session to be saved (returns at once)."""
        self._queue.put((event, session))

    def retry(self) -> None:
        """Try the unsaved events again."""
        self._queue.put(None)

    def drain(self, timeout: float = 10.0) -> bool:
        """Wait until everything handed over has been tried; True if nothing is left unsaved."""
        done = threading.Event()
        self._queue.put(done)
        done.wait(timeout)
        return not self.unsaved

    def close(self, timeout: float = 10.0) -> bool:
        """Write what is queued, then stop the thread; True if nothing is left unsaved."""
        if not self._thread.is_alive():
            return not self.unsaved
        ok = self.drain(timeout)
        self._queue.put(_STOP)
        self._thread.join(timeout)
        return ok

    def rescue(self) -> tuple[int, Path | None]:
        """Save what could not be saved into a rescue folder; (count, last folder used)."""
        count, used = len(self.unsaved), None
        for folder in self.rescue_dirs:
            while self.unsaved:
                event, session = self.unsaved[0]
                try:
                    hist.append(folder, self.profile_name, self.serial, event, session=session)
                except FieldtoolError:
                    break  # try the next folder with what is left
                self.unsaved.pop(0)
                used = folder
        return count, used

    def _run(self) -> None:
        while True:
            item = self._queue.get()
            if item is _STOP:
                return
            if isinstance(item, threading.Event):
                item.set()
                continue
            with self._lock:
                if item is not None:
                    self.unsaved.append(item)
                self._write_unsaved()

    def _write_unsaved(self) -> None:
        while self.unsaved:
            event, session = self.unsaved[0]
            try:
                hist.append(self.logs_dir, self.profile_name, self.serial, event, session=session)
            except FieldtoolError as exc:
                if self.on_error is not None:
                    self.on_error(exc, event)
                return  # keep it and everything after it, in order, for the next try
            self.unsaved.pop(0)
            self.saved += 1
            if self.on_saved is not None:
                self.on_saved(event)
