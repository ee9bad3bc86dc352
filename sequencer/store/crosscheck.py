"""The run's three records (journal, database, manifest) checked against each other on read.

When a session ends, the manifest records what the journal and the database held: the journal's
entries and bytes, the database's devices and a SHA-256 of their identities and results. Every
command that reads a run checks these first, so a device deleted from results.sqlite, a journal
line removed, or a verdict edited in the database is named instead of shown as if measured.
This catches an accident or a naive edit, not a forger (the manifest is not signed). A run that
never ended (a crash) has no such record yet: its resume brings the files together first.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
from pathlib import Path
from typing import Any

from sequencer.model.errors import StoreReadError

JOURNAL_FILE = "journal.jsonl"
RECORD_KEY = "records"  # in manifest.json
MANIFEST_FILE = "manifest.json"
# What a device's result is: changing any of these in the database changes the digest. Each
# entry lists the names a column has had (values, not names, go into the digest).
_RESULT_COLUMNS = (("seq",), ("pass", "round"), ("device",), ("channel",), ("verdict",),
                   ("classification",), ("reasons",), ("hard_bin",), ("bin_class",),
                   ("soft_bin",), ("regulated_current_A",))  # fmt: skip


def records(folder: Path, db: sqlite3.Connection) -> dict[str, Any]:
    """What the journal and the database hold now, for the manifest."""
    path = folder / JOURNAL_FILE
    journal_bytes = path.stat().st_size if path.exists() else 0
    count, digest = _devices(db)
    return {
        "last_entry": _last_seq(db),
        "journal_bytes": journal_bytes,
        "journal_sha256": _file_digest(path),
        "devices": count,
        "devices_sha256": digest,
    }


def _file_digest(path: Path) -> str:
    """SHA-256 of the journal's bytes: an edit that keeps the size (`fail` made `pass`, one
    digit changed) is caught too. Read a MiB at a time; about 1 s per GB here."""
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as f:
            while block := f.read(1 << 20):
                digest.update(block)
    except FileNotFoundError:
        pass
    return digest.hexdigest()


def check_records(folder: Path, manifest: dict[str, Any], db: sqlite3.Connection) -> None:
    """Refuse (StoreReadError) a run whose files no longer hold what its end recorded."""
    recorded = manifest.get(RECORD_KEY)
    if not isinstance(recorded, dict) or manifest.get("status") == "running":
        return  # an older ccbench's run, or a session still going (or crashed: resume first)
    now = records(folder, db)
    for key, what in (
        ("journal_bytes", f"{JOURNAL_FILE} is not the size"),
        ("journal_sha256", f"{JOURNAL_FILE} does not hold the bytes"),
        ("devices", "results.sqlite does not hold the number of devices"),
        ("devices_sha256", "results.sqlite's results are not those"),
        ("last_entry", "results.sqlite's last entry is not the one"),
    ):
        if key in recorded and recorded[key] != now[key]:  # older runs lack the journal's
            raise StoreReadError(
                f"{folder}: the run's records disagree: {what} recorded when the run ended "
                f"({key}: {_short(recorded.get(key))} then, {_short(now[key])} now); "
                "keep the folder as it is and compare journal.jsonl with results.sqlite"
            )


def check_folder(folder: Path, db: sqlite3.Connection) -> None:
    """`check_records` with the folder's own manifest (none, or unreadable: nothing to check;
    the commands that need the manifest say so themselves)."""
    try:
        manifest = json.loads((folder / MANIFEST_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return
    if isinstance(manifest, dict):
        check_records(folder, manifest, db)


def _devices(db: sqlite3.Connection) -> tuple[int, str]:
    have = {row[1] for row in db.execute("PRAGMA table_info(device)")}
    columns = [next((n for n in names if n in have), "NULL") for names in _RESULT_COLUMNS]
    quoted = ", ".join("NULL" if c == "NULL" else f'"{c}"' for c in columns)
    digest = hashlib.sha256()
    count = 0
    for row in db.execute(f"SELECT {quoted} FROM device ORDER BY seq, device"):
        digest.update(repr(row).encode())
        count += 1
    return count, digest.hexdigest()


def _last_seq(db: sqlite3.Connection) -> int:
    return int(db.execute("SELECT COALESCE(MAX(seq), 0) FROM device").fetchone()[0])


def _short(value: Any) -> str:
    text = str(value)
    return text[:12] if len(text) > 12 else text
