"""Helpers for history tests: a folder nobody can write to, even as root."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import pytest


@pytest.fixture
def read_only_dir(tmp_path):
    """Yield a factory making a folder unwritable: mode 0555, or immutable when run as root."""
    made: list[Path] = []

    def make(path: Path) -> Path:
        path.mkdir(parents=True, exist_ok=True)
        if os.geteuid() != 0:
            path.chmod(0o555)
        else:
            chattr = shutil.which("chattr")
            done = chattr and subprocess.run([chattr, "+i", str(path)], capture_output=True)
            if not done or done.returncode != 0:
                pytest.skip("running as root and this file system has no immutable flag")
        made.append(path)
        return path

    yield make
    for path in made:
        if os.geteuid() == 0:
            subprocess.run(["chattr", "-i", str(path)], capture_output=True)
        else:
            path.chmod(0o755)
