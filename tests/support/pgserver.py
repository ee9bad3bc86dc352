"""A throwaway PostgreSQL server for the tests: initdb into a temporary folder, pg_ctl on
127.0.0.1 with a free port and its unix socket inside that folder, stopped at the end.

PostgreSQL refuses to run as root, so as root the server runs as an unprivileged user
(`nobody`, which Debian always has) through `runuser`; the folder is handed to that user.
"""

from __future__ import annotations

import contextlib
import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

SUPERUSER = "ccbench"
UNPRIVILEGED = ("nobody", "postgres")


def find_bindir() -> Path | None:
    """The folder of initdb and pg_ctl: on PATH, else Debian's /usr/lib/postgresql/<v>/bin."""
    on_path = shutil.which("pg_ctl")
    if on_path and shutil.which("initdb"):
        return Path(on_path).parent
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/pg_ctl"), key=_version)
    return Path(found[-1]).parent if found else None


def _version(path: str) -> int:
    part = Path(path).parts[-3]
    return int(part) if part.isdigit() else 0


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _runner() -> tuple[list[str], str | None]:
    """The prefix that runs a command as an unprivileged user (none when we are not root)."""
    if os.geteuid() != 0:
        return [], None
    runuser = shutil.which("runuser")
    if runuser is None:
        raise RuntimeError("running as root without runuser: cannot start PostgreSQL")
    for name in UNPRIVILEGED:
        with contextlib.suppress(KeyError):
            pwd.getpwnam(name)
            return [runuser, "-u", name, "--"], name
    raise RuntimeError(f"running as root and none of the users {UNPRIVILEGED} exists")


@dataclass
class PgServer:
    bindir: Path
    folder: Path
    port: int
    prefix: list[str]

    @property
    def data(self) -> Path:
        return self.folder / "data"

    def url(self, database: str = "postgres") -> str:
        return f"postgresql://{SUPERUSER}@127.0.0.1:{self.port}/{database}"

    def _run(self, *args: str, timeout: float = 60) -> None:
        command = [*self.prefix, str(self.bindir / args[0]), *args[1:]]
        done = subprocess.run(command, capture_output=True, text=True, timeout=timeout)
        if done.returncode:
            log = self.folder / "server.log"
            tail = log.read_text()[-2000:] if log.exists() else ""
            raise RuntimeError(f"{args[0]} failed: {done.stderr.strip()}\n{tail}")

    def init(self) -> None:
        self._run("initdb", "-D", str(self.data), "-U", SUPERUSER, "--auth=trust")

    def start(self) -> None:
        options = f"-c listen_addresses=127.0.0.1 -p {self.port} -k {self.folder} -c fsync=off"
        log = str(self.folder / "server.log")
        self._run(
            "pg_ctl", "-D", str(self.data), "-l", log, "-w", "-t", "30", "-o", options, "start"
        )

    def stop(self) -> None:
        self._run("pg_ctl", "-D", str(self.data), "-m", "fast", "-w", "-t", "30", "stop")

    def create_database(self, name: str) -> str:
        import psycopg

        with psycopg.connect(self.url(), autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.url(name)


def start_server(bindir: Path) -> PgServer:
    prefix, user = _runner()
    folder = Path(tempfile.mkdtemp(prefix="ccbench-pg-", dir="/tmp"))
    if user is not None:
        record = pwd.getpwnam(user)
        os.chown(folder, record.pw_uid, record.pw_gid)
    server = PgServer(bindir, folder, free_port(), prefix)
    try:
        server.init()
        server.start()
    except BaseException:
        shutil.rmtree(folder, ignore_errors=True)
        raise
    return server


def remove_server(server: PgServer) -> None:
    with contextlib.suppress(RuntimeError, subprocess.TimeoutExpired):
        server.stop()
    shutil.rmtree(server.folder, ignore_errors=True)
