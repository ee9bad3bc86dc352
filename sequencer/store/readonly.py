"""Opening a run's results.sqlite for reading only, also where it cannot be written.

A database in WAL mode needs its `-shm` file to be read; on a read-only file system (a finished
run on a write-protected share, a DVD archive) there is none to create, and a plain read-only
open fails with "unable to open database file". With nothing able to write there, the file
cannot change under the reader, so SQLite's `immutable` open is then safe (SQLite URI
parameters, sqlite.org/uri.html).
"""

from __future__ import annotations

import os
import sqlite3
from pathlib import Path


def open_for_reading(path: Path) -> sqlite3.Connection:
    """A read-only connection to `path`; sqlite3.Error as sqlite3 raises it."""
    uri = path.resolve().as_uri()
    try:
        db = sqlite3.connect(f"{uri}?mode=ro", uri=True)
        db.execute("SELECT 1 FROM sqlite_master LIMIT 1")
        return db
    except sqlite3.OperationalError:
        if not read_only_place(path):
            raise
    return sqlite3.connect(f"{uri}?mode=ro&immutable=1", uri=True)


def read_only_place(path: Path) -> bool:
    """Whether the database's folder is on a file system mounted read-only (root ignores
    permission bits, so os.access would not tell)."""
    try:
        return bool(os.statvfs(path.parent).f_flag & os.ST_RDONLY)
    except OSError:
        return False
