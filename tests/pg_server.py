"""A throwaway PostgreSQL server for the store's tests and benchmark: own folder, port, socket.

The server binaries come from the machine (Debian's ``postgresql`` package puts them in
``/usr/lib/postgresql/<version>/bin``; ``.ci/run`` installs it). ``initdb`` refuses to run as
root, so when the tests run as root (as CI does) the data folder is handed to the ``postgres``
user and every server command runs as that user through ``runuser``. Authentication is
``trust`` on the folder's socket and on 127.0.0.1 only: a test server, never a real one.
"""

from __future__ import annotations

import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Mapping
from pathlib import Path

SUPERUSER = "postgres"


def find_bindir() -> Path | None:
    """The folder holding initdb and pg_ctl, newest version first; None when there is none."""
    found = sorted(
        Path("/usr/lib/postgresql").glob("*/bin/initdb"),
        key=lambda p: int(p.parent.parent.name) if p.parent.parent.name.isdigit() else 0,
    )
    if found:
        return found[-1].parent
    initdb = shutil.which("initdb")
    return Path(initdb).parent if initdb else None


def why_unavailable() -> str | None:
    """Why no test server can be started here, or None when one can."""
    if find_bindir() is None:
        return "no PostgreSQL server binaries (Debian package `postgresql`; CI installs it)"
    if os.geteuid() == 0:
        try:
            pwd.getpwnam("postgres")
        except KeyError:
            return "running as root and there is no `postgres` user to run initdb as"
        if shutil.which("runuser") is None:
            return "running as root and `runuser` is missing (util-linux)"
    return None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """One PostgreSQL server in a temporary folder; ``start`` then ``stop``."""

    def __init__(
        self, settings: Mapping[str, str] | None = None, hba: tuple[str, ...] = ()
    ) -> None:
        """``hba``: pg_hba.conf lines put before the ``trust`` ones (to require a password)."""
        self.hba = hba
        self.bindir = find_bindir()
        self.root = Path(tempfile.mkdtemp(prefix="fieldtool-pg-"))
        self.data = self.root / "data"
        self.port = _free_port()
        self.settings = dict(settings or {})
        self._as_postgres = os.geteuid() == 0

    def _run(self, *argv: str) -> subprocess.CompletedProcess:
        cmd = [str(self.bindir / argv[0]), *argv[1:]]
        if self._as_postgres:
            cmd = ["runuser", "-u", "postgres", "--", *cmd]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
        if proc.returncode != 0:
            raise RuntimeError(f"{' '.join(argv[:2])} failed:\n{proc.stdout}\n{proc.stderr}")
        return proc

    def start(self) -> Server:
        """initdb (UTF-8, C locale) and start, listening on 127.0.0.1 and the folder's socket."""
        if self._as_postgres:
            entry = pwd.getpwnam("postgres")
            os.chown(self.root, entry.pw_uid, entry.pw_gid)
        self._run(
            "initdb", "-D", str(self.data), "-U", SUPERUSER, "--auth=trust", "-E", "UTF8",
            "--locale=C",
        )  # fmt: skip
        if self.hba:
            conf = self.data / "pg_hba.conf"
            conf.write_text("\n".join(self.hba) + "\n" + conf.read_text())
        options = {
            "listen_addresses": "127.0.0.1",
            "port": str(self.port),
            "unix_socket_directories": str(self.root),
            **self.settings,
        }
        flags = " ".join(f"-c {k}={v}" for k, v in options.items())
        log = str(self.root / "server.log")
        self._run("pg_ctl", "-D", str(self.data), "-o", flags, "-l", log, "-w", "start")
        return self

    def stop(self) -> None:
        """Stop the server (fast shutdown) and remove its folder."""
        try:
            if (self.data / "postmaster.pid").exists():
                self._run("pg_ctl", "-D", str(self.data), "-m", "fast", "-w", "stop")
        finally:
            shutil.rmtree(self.root, ignore_errors=True)

    def conninfo(self, dbname: str = "postgres", user: str = SUPERUSER) -> str:
        """A libpq connection string over the folder's socket."""
        return f"host={self.root} port={self.port} dbname={dbname} user={user}"

    def url(self, dbname: str = "postgres", user: str = SUPERUSER) -> str:
        """A ``postgresql://`` URL over TCP on 127.0.0.1."""
        return f"postgresql://{user}@127.0.0.1:{self.port}/{dbname}"
