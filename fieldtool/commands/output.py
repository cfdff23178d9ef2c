"""Files a command writes (``calibrate --out``, ``report --out``): whole or not at all.

The text goes to a temporary file in the same folder, which then replaces the target in one
rename, so a full disk or a killed process never leaves an empty or half-written file (which
the next run would refuse to overwrite without ``--force``). Every problem is one line.
"""

from __future__ import annotations

import errno
import os
import uuid
from pathlib import Path

from fieldtool.core.errors import InputError


def check_out(option: str, path: Path, *, force: bool | None = None) -> None:
    """Refuse an output path that cannot be written, before any work is done.

    ``force`` None: overwriting is always allowed; False: an existing file is refused.
    """
    where = f"{option} {path}"
    folder = path.parent
    if path.is_dir():
        raise InputError(f"{where} is a folder; name a file in it")
    if not folder.is_dir():
        raise InputError(f"{where}: folder {folder} does not exist; create it or choose another")
    if force is False and path.exists():
        raise InputError(
            f"{where} exists; pass --force to overwrite it, or choose another {option}"
        )
    if not os.access(folder, os.W_OK):
        raise InputError(f"{where}: folder {folder} is read-only here; choose another {option}")


def write_whole(option: str, path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` whole or not at all (temporary file, then rename)."""
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    try:
        with open(tmp, "xb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise InputError(f"could not write {option} {path}: {_reason(exc)}") from None


def _reason(exc: OSError) -> str:
    if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        return "disk full; nothing was written"
    if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        return "the folder is read-only here; choose another place"
    return f"{exc.strerror or exc}; nothing was written"
