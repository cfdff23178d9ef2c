"""Low-level file operations for the history store: locked appends and atomic rewrites.

Only ``OSError`` leaves this module; ``fieldtool.core.history`` turns it into a message.
"""

from __future__ import annotations

import errno
import fcntl
import os
import stat
import uuid
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path


def fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


@contextmanager
def locked_file(path: Path) -> Iterator[int]:
    """Open (creating) ``path`` read-write under an exclusive flock on the live inode."""
    if not path.parent.is_dir():
        path.parent.mkdir(parents=True, exist_ok=True)
        fsync_dir(path.parent.parent)
    while True:
        fd = os.open(path, os.O_RDWR | os.O_APPEND | os.O_CREAT | os.O_CLOEXEC, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX)
            held, live = os.fstat(fd), _stat_or_none(path)
            if live is not None and (held.st_ino, held.st_dev) == (live.st_ino, live.st_dev):
                yield fd
                return
        finally:
            os.close(fd)  # closing also releases the lock
        # someone replaced the file while we waited: lock the new one instead


def _stat_or_none(path: Path) -> os.stat_result | None:
    try:
        return os.stat(path)
    except FileNotFoundError:
        return None


def remove_if_empty(path: Path, fd: int) -> None:
    """Remove the regular file ``path`` (open as ``fd``, locked by the caller) if it is empty.

    Used when the first write to a new file failed, so a full disk leaves no empty history
    behind; a process waiting for the lock sees the file gone and creates it anew.
    """
    held = os.fstat(fd)
    if held.st_size == 0 and stat.S_ISREG(held.st_mode):
        try:
            os.unlink(path)
        except OSError:
            pass  # then it stays empty, and readers skip empty files


def identity(st: os.stat_result) -> list[int]:
    """A file's identity: inode, device, size, modification and change times (any append or
    rewrite changes one of them)."""
    return [st.st_ino, st.st_dev, st.st_size, st.st_mtime_ns, st.st_ctime_ns]


def read_with_identity(path: Path) -> tuple[list[int], bytes]:
    """A file's identity, taken before its bytes are read (bytes appended after that make the
    identity stale, never the other way round), and those bytes."""
    fd = os.open(path, os.O_RDONLY | os.O_CLOEXEC)
    try:
        st = os.fstat(fd)
        data = os.pread(fd, st.st_size, 0) if st.st_size else b""
    finally:
        os.close(fd)
    return identity(st), data[: st.st_size]


def read_locked(fd: int) -> bytes:
    """The whole content of an open file descriptor."""
    size = os.fstat(fd).st_size
    return os.pread(fd, size, 0) if size else b""


def _encode(lines: Sequence[str | bytes]) -> bytes:
    """Lines (text, or bytes kept exactly as they are) joined with newlines."""
    raw = [x if isinstance(x, bytes) else x.encode("utf-8", "surrogateescape") for x in lines]
    return b"\n".join(raw) + b"\n" if raw else b""


def append_lines(fd: int, lines: Sequence[str | bytes]) -> None:
    """Append whole lines with one write and fsync; undo on failure."""
    size = os.fstat(fd).st_size
    data = _encode(lines)
    if size and os.pread(fd, 1, size - 1) != b"\n":
        data = b"\n" + data  # keep a torn tail on its own line, never merged into ours
    try:
        written = os.write(fd, data)
        if written != len(data):
            raise OSError(errno.ENOSPC, "short write")
        os.fsync(fd)
    except OSError:
        try:
            os.ftruncate(fd, size)
        except OSError:
            pass  # e.g. a device; the caller still learns nothing was saved
        raise


def rewrite(path: Path, lines: Sequence[str | bytes]) -> None:
    """Replace a file's content atomically: temp file in the same folder, fsync, replace."""
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, 0o644)
    try:
        view = memoryview(_encode(lines))
        while view:
            view = view[os.write(fd, view) :]
        os.fsync(fd)
    except BaseException:
        os.close(fd)
        os.unlink(tmp)
        raise
    os.close(fd)
    os.replace(tmp, path)
    fsync_dir(path.parent)
