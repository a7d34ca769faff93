"""A throw-away PostgreSQL server in a temporary folder, for tests and benchmarks.

Uses the Debian ``postgresql`` package's binaries (``/usr/lib/postgresql/<major>/bin``,
not on PATH). The server refuses to run as root, so as root (CI) every server
command runs as the ``postgres`` user through ``runuser`` and the data folder is
handed to that user. Trust authentication on 127.0.0.1 and a free port; fsync off
(the data is thrown away).
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
import uuid
from pathlib import Path


def find_bin() -> Path | None:
    """The newest PostgreSQL server binaries folder, or None."""
    found = [Path(p).parent for p in glob.glob("/usr/lib/postgresql/*/bin/initdb")]
    on_path = shutil.which("initdb")
    if on_path:
        found.append(Path(on_path).parent)
    found = [p for p in found if (p / "pg_ctl").exists()]
    if not found:
        return None

    def major(p: Path) -> int:
        try:
            return int(p.parent.name)
        except ValueError:
            return 0
    return max(found, key=major)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class TempPostgres:
    """``start()`` a server, ``new_database()`` per test, ``stop()`` at the end."""

    def __init__(self, bindir: Path):
        self.bindir = bindir
        self.as_root = hasattr(os, "geteuid") and os.geteuid() == 0
        self.dir = Path(tempfile.mkdtemp(prefix="probelog-pg-"))
        self.port = _free_port()
        self.started = False

    def _run(self, *args: str, timeout: float = 60) -> None:
        cmd = [str(self.bindir / args[0]), *args[1:]]
        if self.as_root:
            cmd = ["runuser", "-u", "postgres", "--", *cmd]
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
        if res.returncode != 0:
            log = (self.dir / "server.log")
            tail = log.read_text(errors="replace")[-2000:] if log.exists() else ""
            raise RuntimeError(f"{' '.join(cmd)} failed ({res.returncode}): {res.stderr.strip()} {tail}")

    def start(self) -> "TempPostgres":
        if self.as_root:
            shutil.chown(self.dir, "postgres", "postgres")
        data = self.dir / "data"
        self._run("initdb", "-D", str(data), "-U", "postgres", "--auth=trust", "-E", "UTF8",
                  "--no-sync", "--no-instructions")
        opts = (f"-p {self.port} -k {self.dir} -c listen_addresses=127.0.0.1 -c fsync=off "
                f"-c synchronous_commit=off -c full_page_writes=off -c max_connections=50")
        self._run("pg_ctl", "-D", str(data), "-o", opts, "-l", str(self.dir / "server.log"), "-w", "-t", "60",
                  "start", timeout=90)
        self.started = True
        return self

    @property
    def url(self) -> str:
        return f"postgresql://postgres@127.0.0.1:{self.port}/postgres"

    def new_database(self) -> str:
        """A fresh empty database; returns its URL."""
        import psycopg

        name = "cat_" + uuid.uuid4().hex[:12]
        with psycopg.connect(f"host=127.0.0.1 port={self.port} user=postgres dbname=postgres",
                             autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        return f"postgresql://postgres@127.0.0.1:{self.port}/{name}"

    def stop(self) -> None:
        try:
            if self.started:
                self._run("pg_ctl", "-D", str(self.dir / "data"), "-m", "immediate", "-w", "stop")
        finally:
            shutil.rmtree(self.dir, ignore_errors=True)
