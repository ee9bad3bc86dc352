"""results.sqlite: opened in WAL mode and migrated, written one device per transaction.

A device is written from its journal entry, live and when catching up after a crash alike, so
the database holds exactly what the journal holds. Synchronous=NORMAL is enough under WAL here:
a commit lost to a power cut is redone from the fsynced journal when the run is resumed.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from sequencer.model.errors import StoreError
from sequencer.store.journal import decode_floats, encode_floats
from sequencer.store.migrations import migrate, transaction
from sequencer.store.oldnames import current

POINT_FIELDS = ("step", "level_V", "voltage_V", "current_A", "time_s", "in_compliance")
SESSION_FIELDS = (
    "started", "status", "pid", "host", "operator", "software_version",
    "recipe_sha256", "recipe_text", "station_text", "resource", "identity",
)  # fmt: skip


def open_database(path: Path) -> sqlite3.Connection:
    """Open (or create) and migrate to the latest schema; errors become one StoreError."""
    try:
        db = sqlite3.connect(path, isolation_level=None)
        try:
            db.execute("PRAGMA journal_mode=WAL")
            db.execute("PRAGMA synchronous=NORMAL")
            migrate(db, str(path))
        except BaseException:
            db.close()
            raise
    except sqlite3.Error as exc:
        raise StoreError(f"{path}: cannot be opened ({exc})") from None
    return db


def insert_run(db: sqlite3.Connection, manifest: dict[str, Any]) -> int:
    """The run row from the manifest's run-level fields (columns the table lacks are left out:
    the manifest keeps everything)."""
    columns = _columns(db, "run")
    fields = {k: v for k, v in manifest.items() if k in columns and k not in ("id", "status")}
    fields["status"] = manifest.get("status", "running")
    with transaction(db):
        cur = db.execute(
            f"INSERT INTO run ({', '.join(fields)}) VALUES ({', '.join('?' * len(fields))})",
            list(fields.values()),
        )
    return int(cur.lastrowid or 0)


def update_run(db: sqlite3.Connection, run_id: int, **fields: Any) -> None:
    sets = ", ".join(f"{k} = ?" for k in fields)
    with transaction(db):
        db.execute(f"UPDATE run SET {sets} WHERE id = ?", [*fields.values(), run_id])


def begin_session(db: sqlite3.Connection, run_id: int, number: int, info: dict[str, Any]) -> None:
    fields = {k: info.get(k) for k in SESSION_FIELDS}
    cols = ["run_id", "session", *fields]
    marks = ", ".join("?" * len(cols))
    with transaction(db):
        db.execute(
            f"INSERT OR REPLACE INTO session ({', '.join(cols)}) VALUES ({marks})",
            [run_id, number, *fields.values()],
        )


def update_session(db: sqlite3.Connection, run_id: int, number: int, **fields: Any) -> None:
    sets = ", ".join(f"{k} = ?" for k in fields)
    with transaction(db):
        db.execute(
            f"UPDATE session SET {sets} WHERE run_id = ? AND session = ?",
            [*fields.values(), run_id, number],
        )


def mark_lost(db: sqlite3.Connection, run_id: int, status: str) -> None:
    """Sessions still 'running' when a new one begins ended without recording it."""
    with transaction(db):
        db.execute(
            "UPDATE session SET status = ? WHERE run_id = ? AND status = 'running'",
            (status, run_id),
        )


def write_device(db: sqlite3.Connection, run_id: int, entry: dict[str, Any]) -> bool:
    """Store one journal entry (device row and its points) in one transaction. An entry for a
    device already stored (an aborted one, measured again on resume) replaces it. Returns
    whether it replaced one."""
    row = {k: v for k, v in current(entry).items() if k != "points"}
    key = (run_id, row["round"], row["device"])
    points = entry["points"]
    with transaction(db):
        replaced = db.execute(
            "SELECT 1 FROM device WHERE run_id = ? AND round = ? AND device = ?", key
        ).fetchone()
        if replaced:
            db.execute("DELETE FROM point WHERE run_id = ? AND round = ? AND device = ?", key)
            db.execute("DELETE FROM device WHERE run_id = ? AND round = ? AND device = ?", key)
        cols = ["run_id", *row]
        db.execute(
            f"INSERT INTO device ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})",
            [run_id, *row.values()],
        )
        db.executemany(
            "INSERT INTO point (run_id, round, device, idx, step, level_V, voltage_V, current_A,"
            " time_s, in_compliance) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            _point_rows(key, points),
        )
    return bool(replaced)


def _point_rows(key: tuple[int, int, str], points: dict[str, list]) -> Iterator[tuple]:
    numbers = [decode_floats(points[name]) for name in ("level_V", "voltage_V", "current_A")]
    times = decode_floats(points["time_s"])
    for idx, step in enumerate(points["step"]):
        values = (numbers[0][idx], numbers[1][idx], numbers[2][idx], times[idx])
        yield (*key, idx, step, *values, int(points["in_compliance"][idx]))


def journal_entry(db: sqlite3.Connection, run_id: int, seq: int) -> dict[str, Any] | None:
    """The journal line of entry `seq` as `write_device` stored it (None if not stored):
    the device row without its run id, then its points in journal form."""
    cur = db.execute("SELECT * FROM device WHERE run_id = ? AND seq = ?", (run_id, seq))
    row = cur.fetchone()
    if row is None:
        return None
    names = [d[0] for d in cur.description]
    entry = {n: v for n, v in zip(names, row, strict=True) if n != "run_id"}
    key = (run_id, entry["round"], entry["device"])
    points = db.execute(
        f"SELECT {', '.join(POINT_FIELDS)} FROM point WHERE run_id = ? AND round = ? AND "
        "device = ? ORDER BY idx",
        key,
    ).fetchall()
    columns = list(zip(*points, strict=True)) if points else [()] * len(POINT_FIELDS)
    entry["points"] = {
        name: (
            encode_floats([float("nan") if v is None else v for v in values])
            if name.endswith(("_V", "_A", "_s"))
            else list(values)
        )
        for name, values in zip(POINT_FIELDS, columns, strict=True)
    }
    return {"seq": entry.pop("seq"), **entry}


def last_seq(db: sqlite3.Connection, run_id: int) -> int:
    value = db.execute("SELECT MAX(seq) FROM device WHERE run_id = ?", (run_id,)).fetchone()[0]
    return int(value or 0)


def the_run(db: sqlite3.Connection) -> int | None:
    """The id of the folder's run (a run folder holds one)."""
    row = db.execute("SELECT id FROM run ORDER BY id LIMIT 1").fetchone()
    return None if row is None else int(row[0])


def device_rows(db: sqlite3.Connection, run_id: int, columns: list[str]) -> Iterator[tuple]:
    """Device rows in the order they were measured, for the CSV (streamed, not listed)."""
    quoted = ", ".join(f'"{c}"' for c in columns)
    yield from db.execute(
        f"SELECT {quoted} FROM device WHERE run_id = ? ORDER BY round, seq", (run_id,)
    )


def _columns(db: sqlite3.Connection, table: str) -> set[str]:
    return {row[1] for row in db.execute(f"PRAGMA table_info({table})")}
