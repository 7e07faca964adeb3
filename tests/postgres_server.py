"""A throwaway PostgreSQL server for a test run, from Debian's postgresql package.

Used by the suite only when no PostgreSQL answers at the test URL: a cluster is made in a
temporary folder, served on a free local port with trust authentication (user ``postgres``,
database ``test``), and removed when the run ends. As root the server runs as the package's
unprivileged ``postgres`` user (PostgreSQL refuses to run as root); otherwise as the current user.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path

__all__ = ["ThrowawayPostgres", "server_binaries", "HOW_TO_INSTALL"]

HOW_TO_INSTALL = "sudo apt-get install -y postgresql (or run scripts/test-setup as root)"


def server_binaries() -> Path | None:
    """The newest installed Debian PostgreSQL bin folder that holds initdb and pg_ctl, or None."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parent.parent.name))
    return Path(found[-1]).parent if found else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class ThrowawayPostgres:
    """``start()`` a cluster in a temporary folder and return its URL; ``stop()`` removes it all."""

    def __init__(self, binaries: Path) -> None:
        self.binaries = binaries
        self.folder = Path(tempfile.mkdtemp(prefix="railsign-pg-"))
        self.port = _free_port()
        self._as_user: list[str] = []
        if os.geteuid() == 0:
            shutil.chown(self.folder, user="postgres")
            self._as_user = ["runuser", "-u", "postgres", "--"]

    def _run(self, *args: str) -> None:
        subprocess.run([*self._as_user, *args], check=True, capture_output=True, timeout=120, cwd=self.folder)

    def start(self) -> str:
        data = self.folder / "data"
        self._run(str(self.binaries / "initdb"), "-D", str(data), "-A", "trust", "-U", "postgres", "-E", "UTF8")
        self._run(str(self.binaries / "pg_ctl"), "-D", str(data), "-l", str(self.folder / "server.log"), "-w",
                  "-o", f"-p {self.port} -k {self.folder} -c listen_addresses=127.0.0.1", "start")
        self._run(str(self.binaries / "createdb"), "-h", "127.0.0.1", "-p", str(self.port), "-U", "postgres", "test")
        return f"postgresql+psycopg://postgres@127.0.0.1:{self.port}/test"

    def stop(self) -> None:
        try:
            self._run(str(self.binaries / "pg_ctl"), "-D", str(self.folder / "data"), "-m", "immediate", "-w", "stop")
        except (subprocess.CalledProcessError, subprocess.TimeoutExpired):
            pass
        shutil.rmtree(self.folder, ignore_errors=True)
