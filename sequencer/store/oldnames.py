"""Names the store has changed, and the one place where an old name becomes the new one.

Schema 8 renamed the repetition number `pass` (which read like the verdict "pass") to `round`,
and `pass_started` to `round_started`. A folder written before keeps the old names in its
journal, and in results.sqlite and devices.csv until a command opens it for writing (the
migration renames the columns). What reads a journal entry, a device row or a table passes it
through here, so the rest of the code knows only the new names; a folder on a read-only file
system, which cannot be migrated, is read under its old names through `round_column`.
"""

from __future__ import annotations

import sqlite3
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the journal imports this module on a run's path, which never loads pandas
    import pandas as pd

OLD_NAMES = {"pass": "round", "pass_started": "round_started"}


def current(entry: dict[str, Any]) -> dict[str, Any]:
    """A journal entry or device row under today's names (the same dict when nothing changed)."""
    if not any(old in entry for old in OLD_NAMES):
        return entry
    return {OLD_NAMES.get(key, key): value for key, value in entry.items()}


def current_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A table read from a file of before schema 8, under today's column names."""
    old = [c for c in frame.columns if c in OLD_NAMES]
    return frame.rename(columns={c: OLD_NAMES[c] for c in old}) if old else frame


def round_column(db: sqlite3.Connection, table: str = "device") -> str | None:
    """What `table` calls the round number: 'round', 'pass' (a file of before schema 8 read
    where it could not be migrated) or None (before schema 3, when every device was round 1)."""
    have = {row[1] for row in db.execute(f"PRAGMA table_info({table})")}
    return next((name for name in ("round", "pass") if name in have), None)
