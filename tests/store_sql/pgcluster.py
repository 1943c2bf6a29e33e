"""A throwaway PostgreSQL cluster for the tests: initdb in a temporary folder, a Unix socket there, trust auth.

Run as root, the cluster belongs to the ``postgres`` user (initdb refuses root) and is started with
``runuser``. Nothing listens on TCP, so clusters of parallel test runs never meet.
"""
from __future__ import annotations

import contextlib
import glob
import os
import pwd
import shutil
import subprocess
import tempfile
import uuid
from pathlib import Path


def pg_bindir() -> Path | None:
    """The folder of PostgreSQL's server programs (initdb, pg_ctl), or None when none is installed."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parts[-3]))
    if found:
        return Path(found[-1]).parent
    initdb = shutil.which("initdb")
    return Path(os.path.realpath(initdb)).parent if initdb else None


class PgCluster:
    """One started cluster; :meth:`new_database` gives a fresh database's SQLAlchemy URL."""

    def __init__(self, bindir: Path):
        self.bindir = bindir
        self.root = Path(tempfile.mkdtemp(prefix="swpg-"))
        self.data = self.root / "data"
        self.user = None
        self._as = []
        if os.geteuid() == 0:
            self.user = "postgres"
            pw = pwd.getpwnam(self.user)
            os.chown(self.root, pw.pw_uid, pw.pw_gid)
            self._as = ["runuser", "-u", self.user, "--"]
        self.role = self.user or pwd.getpwuid(os.geteuid()).pw_name

    def _run(self, *args: str) -> None:
        subprocess.run([*self._as, *args], check=True, capture_output=True, text=True, timeout=120)

    def start(self, *, fsync: bool = False) -> PgCluster:
        """initdb and start; ``fsync`` off by default (a test cluster need not survive a power cut)."""
        self._run(str(self.bindir / "initdb"), "-D", str(self.data), "-A", "trust", "-U", self.role,
                  "-E", "UTF8", "--no-locale")
        opts = (f"-c listen_addresses='' -c unix_socket_directories='{self.root}' "
                f"-c fsync={'on' if fsync else 'off'} "
                "-c max_connections=100")
        self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-l", str(self.root / "log"), "-w",
                  "-t", "60", "-o", opts, "start")
        return self

    def url(self, database: str = "postgres") -> str:
        return f"postgresql+psycopg://{self.role}@/{database}?host={self.root}"

    def new_database(self) -> str:
        """Create an empty database; returns its URL."""
        import psycopg

        name = f"sw_{uuid.uuid4().hex[:12]}"
        with psycopg.connect(host=str(self.root), user=self.role, dbname="postgres", autocommit=True) as con:
            con.execute(f'CREATE DATABASE "{name}"')
        return self.url(name)

    def stop(self) -> None:
        with contextlib.suppress(subprocess.SubprocessError, OSError):
            self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "immediate", "stop")
        shutil.rmtree(self.root, ignore_errors=True)
