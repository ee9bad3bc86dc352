"""Continuing an interrupted run: what the folder holds, brought up to date from the journal.

The journal is the record of truth. A crash can leave it with a torn last line (dropped), and
the database and CSV behind it by the device whose journal line was fsynced just before the
crash (redone from the journal here, so that nothing is stored twice and nothing is lost).
What is left to do is read from the database afterwards: the devices of the last round that
have no complete result (never measured, or aborted) are measured again.
"""

from __future__ import annotations

import datetime as dt
import os
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sequencer.model.errors import StoreError
from sequencer.store import database as dbase
from sequencer.store.journal import append_rebuilt, read_entries, recover
from sequencer.store.runfolder import FolderRefused

JOURNAL_FILE = "journal.jsonl"
DATABASE_FILE = "results.sqlite"


@dataclass(frozen=True)
class Progress:
    """Where a run stands when a session starts: the round to continue, its channels with a
    complete result, when that round and the run began, how many devices are stored, and what
    the resume found (lines for the screen)."""

    session: int = 1
    round_no: int = 1
    done: frozenset[int] = frozenset()
    round_started: str | None = None
    run_started: str = ""
    stored: int = 0
    notes: tuple[str, ...] = ()


def check_recipe(folder: Path, stored: dict[str, Any], new: dict[str, Any], accept: bool) -> str:
    """Refuse to continue under another recipe or station unless `accept`, or for another lot
    at all (a lot is what the results are filed under); returns a note."""
    old_lot, new_lot = stored.get("lot"), new.get("lot")
    if old_lot is not None and new_lot is not None and old_lot != new_lot:
        raise FolderRefused(
            folder, f"holds lot {old_lot!r}, not {new_lot!r}; resume it with --lot {old_lot!r}"
        )
    old_digest, new_digest = stored.get("recipe_sha256"), new.get("recipe_sha256")
    if old_digest == new_digest:
        return ""
    if not accept:
        raise FolderRefused(
            folder,
            f"was started with another recipe or station (sha256 {str(old_digest)[:12]}, now "
            f"{str(new_digest)[:12]}); add --accept-changed-recipe to continue it with this one",
        )
    return (
        f"continuing with a changed recipe or station (sha256 {str(old_digest)[:12]} -> "
        f"{str(new_digest)[:12]}); the session records which devices were measured under it"
    )


def open_or_rebuild(folder: Path, manifest: dict[str, Any]) -> tuple[sqlite3.Connection, int, str]:
    """Open results.sqlite, or set a damaged one aside and start it again (the journal fills
    it). Returns the connection, the run id and a note ('' when all was well)."""
    path = folder / DATABASE_FILE
    note = ""
    try:
        db = dbase.open_database(path)
    except StoreError:
        if not path.exists():
            raise
        aside = path.with_name(f"{DATABASE_FILE}.damaged-{dt.datetime.now():%Y%m%d-%H%M%S}")
        _move_aside(path, aside)
        note = f"{path.name} could not be opened; kept as {aside.name} and rebuilt from the journal"
        db = dbase.open_database(path)
    run_id = dbase.the_run(db)
    if run_id is None:
        run_id = dbase.insert_run(db, manifest)
    return db, run_id, note


def _move_aside(path: Path, aside: Path) -> None:
    for suffix in ("", "-wal", "-shm"):
        part = Path(str(path) + suffix)
        if part.exists():
            os.replace(part, Path(str(aside) + suffix))


def journal_notes(folder: Path, db: sqlite3.Connection, run_id: int) -> tuple[int, str]:
    """Cut off a torn last line; returns the last good sequence number and a note. Nothing is
    changed before the journal and the database are known to fit: a torn last line whose entry
    the database holds (the line was damaged after both were written) is written again from
    the database; a database ahead of the journal otherwise is a hand's doing, refused."""
    path = folder / JOURNAL_FILE
    found = recover(path, cut=False)
    have = dbase.last_seq(db, run_id)
    if have > found.last_seq:
        torn_one = found.dropped and have == found.last_seq + 1
        lost = dbase.journal_entry(db, run_id, have) if torn_one else None
        if lost is None:
            raise StoreError(
                f"{folder}: {DATABASE_FILE} holds entries up to {have}, {JOURNAL_FILE} ends at "
                f"entry {found.last_seq}; the folder was changed by hand, keep it as it is"
            )
        recover(path)
        append_rebuilt(path, [lost])
        return have, (
            f"{JOURNAL_FILE}: its torn last line (entry {have}) was written again from "
            f"{DATABASE_FILE}, which holds it"
        )
    note = ""
    if found.dropped:
        recover(path)
        note = (
            f"{JOURNAL_FILE}: dropped a torn last line ({len(found.dropped)} bytes) left by the "
            f"crash; the {found.entries} entries before it are kept"
        )
    return found.last_seq, note


def catch_up(db: sqlite3.Connection, run_id: int, folder: Path, journal_seq: int) -> int:
    """Store every journal entry the database lacks, in order; returns how many."""
    have = dbase.last_seq(db, run_id)
    if have > journal_seq:
        raise StoreError(
            f"{folder}: {DATABASE_FILE} holds devices that {JOURNAL_FILE} does not "
            f"(entry {have} > {journal_seq}); the folder was changed by hand, keep it as it is"
        )
    applied = 0
    path = folder / JOURNAL_FILE
    if have < journal_seq:
        for entry in read_entries(path):
            if entry["seq"] > have:
                dbase.write_device(db, run_id, entry)
                applied += 1
    return applied


def progress(
    db: sqlite3.Connection, run_id: int, session: int, run_started: str, notes: list[str]
) -> Progress:
    """The round to continue and its channels with a complete result (not aborted)."""
    last = db.execute("SELECT MAX(round) FROM device WHERE run_id = ?", (run_id,)).fetchone()[0]
    stored = db.execute("SELECT COUNT(*) FROM device WHERE run_id = ?", (run_id,)).fetchone()[0]
    if last is None:
        return Progress(session, 1, frozenset(), None, run_started, 0, tuple(notes))
    done = db.execute(
        "SELECT channel FROM device WHERE run_id = ? AND round = ? AND verdict != 'aborted'",
        (run_id, last),
    ).fetchall()
    started = db.execute(
        "SELECT MIN(round_started) FROM device WHERE run_id = ? AND round = ?", (run_id, last)
    ).fetchone()[0]
    channels = frozenset(int(c) for (c,) in done)
    return Progress(session, int(last), channels, started, run_started, int(stored), tuple(notes))


def session_info(number: int, new: dict[str, Any], run: dict[str, Any]) -> dict[str, Any]:
    """One start or resume of the run, as the manifest and the session table keep it; the
    recipe and station text only when they differ from the run's."""
    info: dict[str, Any] = {"session": number, "status": "running", "pid": os.getpid()}
    for key in ("started", "host", "operator", "software_version", "resource", "recipe_sha256"):
        info[key] = new.get(key)
    if new.get("recipe_sha256") != run.get("recipe_sha256"):
        info["recipe_text"] = new.get("recipe_text")
        info["station_text"] = new.get("station_text")
    return info
