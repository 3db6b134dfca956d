"""A throwaway PostgreSQL server for the tests: initdb in a temporary folder, a free port on
127.0.0.1, trust authentication, stopped and removed at the end of the test run.

UNEVEN_PG_DSN (a libpq connection string) uses an existing server instead. As root (CI), the
server runs as the ``postgres`` OS user, since PostgreSQL refuses to run as root.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path


def find_bin(name: str) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"), reverse=True)
    return candidates[0] if candidates else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class PostgresServer:
    def __init__(self):
        self.dir: Path | None = None
        self.dsn = os.environ.get("UNEVEN_PG_DSN")
        if self.dsn:
            return
        initdb, pg_ctl = find_bin("initdb"), find_bin("pg_ctl")
        if not initdb or not pg_ctl:
            raise RuntimeError("PostgreSQL server binaries (initdb, pg_ctl) not found; install the "
                               "postgresql package or set UNEVEN_PG_DSN")
        self.pg_ctl = pg_ctl
        self.as_user: list[str] = []
        if os.geteuid() == 0:  # PostgreSQL refuses to run as root
            runuser = shutil.which("runuser")
            if not runuser:
                raise RuntimeError("running as root, but runuser is missing to start PostgreSQL as postgres")
            self.as_user = [runuser, "-u", "postgres", "--"]
        self.dir = Path(tempfile.mkdtemp(prefix="uneven-pg-"))
        self.data = self.dir / "data"
        try:
            self._start()
        except Exception:
            shutil.rmtree(self.dir, ignore_errors=True)
            self.dir = None
            raise

    def _start(self) -> None:
        data = self.dir / "data"
        if self.as_user:
            shutil.chown(self.dir, "postgres", "postgres")
        initdb = find_bin("initdb")
        self._run([initdb, "-D", str(data), "-U", "postgres", "--auth=trust", "-E", "UTF8", "--no-sync"])
        port = _free_port()
        opts = (f"-p {port} -k {self.dir} -c listen_addresses=127.0.0.1 -c fsync=off "
                "-c synchronous_commit=off -c full_page_writes=off -c max_connections=10")
        self._run([self.pg_ctl, "-D", str(data), "-o", opts, "-l", str(self.dir / "log"), "-w", "-t", "60", "start"])
        self.dsn = f"host=127.0.0.1 port={port} user=postgres dbname=postgres"

    def _run(self, cmd: list[str]) -> None:
        done = subprocess.run(self.as_user + cmd, capture_output=True, text=True, timeout=120)
        if done.returncode != 0:
            raise RuntimeError(f"{Path(cmd[0]).name} failed: {(done.stderr or done.stdout).strip()[-500:]}")

    def stop(self) -> None:
        if self.dir is None:
            return
        try:
            self._run([self.pg_ctl, "-D", str(self.data), "-m", "immediate", "-w", "stop"])
        except Exception:  # noqa: BLE001 (already stopped)
            pass
        shutil.rmtree(self.dir, ignore_errors=True)
        self.dir = None
