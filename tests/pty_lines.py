"""Shared by the pty tests: the command lines a program sends to the master side of a pty."""

from __future__ import annotations

import os
from collections.abc import Iterator


def pty_lines(fd: int) -> Iterator[str]:
    """Each newline-terminated line read from ``fd``, stripped; stops at EOF or a closed fd."""
    buf = b""
    while True:
        try:
            chunk = os.read(fd, 256)
        except OSError:
            return
        if not chunk:
            return
        buf += chunk
        while b"\n" in buf:
            line, buf = buf.split(b"\n", 1)
            yield line.decode().strip()
