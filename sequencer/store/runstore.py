"""The run folder: a journal line per device (flushed and fsynced) first, then SQLite, then CSV.

Layout of a run folder:
    run.lock         held (flock, with the folder itself) by the run using it; names its pid
                     and host
    manifest.json    the run: recipe and station text, hash, instrument, software, sessions
    journal.jsonl    one JSON object per device, the first place a result is written
    results.sqlite   tables run, session, device, point (schema version in PRAGMA user_version)
    devices.csv      one row per device and round, figures with their uncertainties beside them
    scpi.log         every SCPI exchange with a timestamp (written by the driver's spy)

A device's key is (round, device): a repeated run measures each tray position once per round.
"""

from __future__ import annotations

import csv
import math
import os
import sqlite3
import uuid
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import IO, Any

from sequencer.judge.engine import Judgement
from sequencer.model.curve import Curve
from sequencer.model.errors import StoreError
from sequencer.model.judgesettings import FIGURE_UNIT, FIGURES
from sequencer.store import database as dbase
from sequencer.store.crosscheck import RECORD_KEY, records
from sequencer.store.journal import Journal, encode_floats
from sequencer.store.migrations import LATEST
from sequencer.store.resume import (
    Progress,
    catch_up,
    check_recipe,
    journal_notes,
    open_or_rebuild,
    progress,
    session_info,
)
from sequencer.store.runfolder import (
    FolderLock,
    FolderRefused,
    clear_run,
    holds_run,
    never_reached,
    read_manifest,
    unwritable,
    utc_now,
    write_manifest,
)

# 2: bins, reverse and peak figures; 3: rounds; 4: standing; 5: ended; 8: `pass` -> `round`
SCHEMA_VERSION = LATEST
UNITS = FIGURE_UNIT
BIN_COLUMNS = ["hard_bin", "bin_class", "soft_bin"]


def figure_columns() -> list[str]:
    cols = []
    for name in FIGURES:
        unit = UNITS[name]
        cols += [f"{name}_{unit}", f"{name}_u_{unit}", f"{name}_at_least"]
        cols += [f"{name}_k", f"{name}_dof"]
    return cols


CSV_COLUMNS = [
    "device",
    "channel",
    "verdict",
    *BIN_COLUMNS,
    *figure_columns(),
    "classification",
    "reasons",
]
# devices.csv: a device row with its round number and the time it was measured
RUN_CSV_COLUMNS = ["device", "round", *CSV_COLUMNS[1:], "measured"]


def _num(x: float) -> float | None:
    return x if math.isfinite(x) else None


def device_row(judgement: Judgement, channel: int) -> dict[str, Any]:
    row: dict[str, Any] = {"device": judgement.device, "channel": channel}
    row["verdict"] = judgement.verdict
    row["hard_bin"] = judgement.hard_bin
    row["bin_class"] = judgement.bin_class
    row["soft_bin"] = judgement.soft_bin
    for name in FIGURES:
        fig, unit = judgement.figures[name], UNITS[name]
        row[f"{name}_{unit}"] = _num(fig.value)
        row[f"{name}_u_{unit}"] = _num(fig.uncertainty)
        row[f"{name}_at_least"] = int(fig.at_least)
        row[f"{name}_k"] = _num(fig.coverage_factor)
        # JSON has no infinity: an empty dof beside a known u is infinite (Type B parts only).
        row[f"{name}_dof"] = _num(fig.dof)
    row["classification"] = judgement.classification
    row["reasons"] = "; ".join(judgement.notes)  # failing reasons, then guard-band notes
    return row


JOURNAL_FILE = "journal.jsonl"
DATABASE_FILE = "results.sqlite"
CSV_FILE = "devices.csv"
LOST = "ended unrecorded"  # a session whose process died (SIGKILL, power cut) before its end


@dataclass
class RunStore:
    """An open run folder, locked for this process. Open it with `create` (a new run) or
    `resume` (continue one); close it with `finish`. `begin_round` names the round the next
    devices belong to."""

    folder: Path
    db: sqlite3.Connection
    run_id: int
    journal: Journal
    csv_file: IO[str]
    lock: FolderLock
    manifest: dict[str, Any]
    progress: Progress = field(default_factory=Progress)
    round_no: int = 1
    round_started: str | None = None
    temperature: dict[str, float | None] = field(default_factory=dict)  # see at_temperature

    @property
    def session(self) -> int:
        return self.progress.session

    @classmethod
    def create(cls, folder: Path, manifest: dict[str, Any]) -> RunStore:
        """A new run in `folder`; refused when the folder holds one already."""
        lock = FolderLock.take(folder)
        try:
            if not holds_run(folder):
                return cls._new(folder, lock, manifest)
            unreached = never_reached(folder)
            if unreached is None:
                raise FolderRefused(
                    folder,
                    "already holds a run; add --resume to continue it, or choose another --out",
                )
            return cls._again(folder, lock, manifest, unreached)
        except BaseException:
            lock.release()
            raise

    @classmethod
    def resume(
        cls, folder: Path, manifest: dict[str, Any], *, accept_changed_recipe: bool = False
    ) -> RunStore:
        """Continue the run in `folder` (start it, if it holds none): drop a torn journal
        line, bring the database and CSV up to date from the journal, open a new session."""
        lock = FolderLock.take(folder)
        try:
            if not holds_run(folder):
                store = cls._new(folder, lock, manifest)
                note = f"{folder}: held no run to resume; started a new one"
                store.progress = replace(store.progress, notes=(note,))
                return store
            return cls._continue(folder, lock, manifest, accept_changed_recipe)
        except BaseException:
            lock.release()
            raise

    @classmethod
    def _again(
        cls, folder: Path, lock: FolderLock, manifest: dict[str, Any], unreached: dict[str, Any]
    ) -> RunStore:
        """A new run in place of one that never reached its instrument (its uid kept, so a
        shared database that saw it sees one run)."""
        try:
            clear_run(folder)
        except OSError as exc:
            raise unwritable(folder, exc) from None
        store = cls._new(folder, lock, manifest, uid=str(unreached.get("uid") or ""))
        note = (
            f"{folder}: held a run that never reached its instrument (nothing measured); "
            "started it again there"
        )
        store.progress = replace(store.progress, notes=(note,))
        return store

    @classmethod
    def _new(
        cls, folder: Path, lock: FolderLock, manifest: dict[str, Any], uid: str = ""
    ) -> RunStore:
        run = {"uid": uid or uuid.uuid4().hex, **manifest, "status": "running"}
        session = session_info(1, manifest, run)
        run["sessions"] = [session]
        try:
            write_manifest(folder, run)
            db = dbase.open_database(folder / DATABASE_FILE)
            run_id = dbase.insert_run(db, run)
            dbase.begin_session(db, run_id, 1, session)
            journal = Journal(folder / JOURNAL_FILE)
            csv_file = _rewrite_csv(folder, db, run_id)
        except OSError as exc:
            raise unwritable(folder, exc) from None
        except sqlite3.Error as exc:
            raise StoreError(f"{folder}/{DATABASE_FILE}: cannot be created ({exc})") from None
        progress = Progress(run_started=str(run.get("started", "")))
        return cls(folder, db, run_id, journal, csv_file, lock, run, progress)

    @classmethod
    def _continue(
        cls, folder: Path, lock: FolderLock, manifest: dict[str, Any], accept: bool
    ) -> RunStore:
        run = read_manifest(folder)
        notes = [check_recipe(folder, run, manifest, accept)]
        db, run_id, journal, csv_file, found = _reopen(folder, run)
        number = len(run.get("sessions", [])) + 1
        session = session_info(number, manifest, run)
        for earlier in run.setdefault("sessions", []):
            if earlier.get("status") == "running":  # its process died without a word
                earlier["status"] = LOST
        run["sessions"].append(session)
        run["status"] = "running"
        store = cls(folder, db, run_id, journal, csv_file, lock, run)
        try:
            store._write_meta(lambda: dbase.mark_lost(db, run_id, LOST))
            store._write_meta(lambda: dbase.begin_session(db, run_id, number, session))
            store._write_meta(lambda: dbase.update_run(db, run_id, status="running"))
        except BaseException:
            store._close()
            raise
        done = [n for n in notes + found if n]
        store.progress = progress(db, run_id, number, str(run.get("started", "")), done)
        return store

    def at_temperature(self, set_point_c: float, chamber_c: float, fixture_c: float | None) -> None:
        """The devices stored from now on were measured at this set point, the chamber's and the
        fixture's sensors reading these (degC) once it was stable."""
        self.temperature = {
            "set_point_C": set_point_c,
            "chamber_C": chamber_c,
            "fixture_C": fixture_c,
        }

    def begin_round(self, round_no: int, started: str | None = None) -> None:
        """The devices stored from now on belong to round `round_no`, which began at `started`.
        Refused (LockLost) once the folder's lock was taken away, before a device is measured."""
        self.lock.check()
        self.round_no = round_no
        self.round_started = started or utc_now()

    def add_device(
        self, curve: Curve, judgement: Judgement, extra: dict[str, Any] | None = None
    ) -> None:
        """Journal (fsync) first, then one SQLite transaction, then the CSV row. `extra`: more
        device columns (part-by-part testing adds `standing`)."""
        entry: dict[str, Any] = {"round": self.round_no, "session": self.session}
        entry.update(device_row(judgement, curve.channel))
        entry.update(self.temperature)
        entry.update(extra or {})
        entry["measured"] = utc_now()
        entry["round_started"] = self.round_started or entry["measured"]
        entry["points"] = _points(curve)
        self.lock.check()  # another run may own the folder now: write nothing then
        try:
            entry = {"seq": self.journal.append(entry), **entry}
        except OSError as exc:
            raise StoreError(
                f"{self.folder}: result of {curve.device} could not be written "
                f"({exc.strerror or exc}); everything before it is kept"
            ) from None
        self.lock.check(f"the result of {curve.device} in the journal only")
        try:
            self._database_and_csv(entry)
        except (OSError, sqlite3.Error) as exc:
            why = getattr(exc, "strerror", None) or str(exc)
            raise StoreError(
                f"{self.folder}: result of {curve.device} is in the journal but not in "
                f"{DATABASE_FILE}/{CSV_FILE} ({why}); --resume brings them up to date"
            ) from None

    def _database_and_csv(self, entry: dict[str, Any]) -> None:
        if dbase.write_device(self.db, self.run_id, entry):
            self.csv_file.close()  # an aborted device measured again: its row is replaced
            self.csv_file = _rewrite_csv(self.folder, self.db, self.run_id)
            return
        csv.writer(self.csv_file).writerow([_csv(entry.get(c)) for c in RUN_CSV_COLUMNS])
        self.csv_file.flush()

    def counts(self) -> tuple[int, int]:
        """Devices stored in the run so far, and over how many rounds."""
        row = self.db.execute(
            "SELECT COUNT(*), COUNT(DISTINCT round) FROM device WHERE run_id = ?", (self.run_id,)
        ).fetchone()
        return int(row[0]), int(row[1])

    def attempt_rows(self) -> list[tuple]:
        """(device, round, verdict, bin_class, standing, channel) of every stored device of the
        run, in the order they were stored: the attempts a part-by-part run resumes with."""
        return self.db.execute(
            "SELECT device, round, verdict, bin_class, standing, channel FROM device "
            "WHERE run_id = ? ORDER BY seq",
            (self.run_id,),
        ).fetchall()

    def set_identity(self, resource: str, identity: str) -> None:
        """The instrument this session talks to (resource string and *IDN? reply)."""
        self.manifest.update(resource=resource, identity=identity)
        self.manifest["sessions"][-1].update(resource=resource, identity=identity)
        ids = {"resource": resource, "identity": identity}
        self._write_meta(lambda: dbase.update_run(self.db, self.run_id, **ids))
        self._write_meta(lambda: dbase.update_session(self.db, self.run_id, self.session, **ids))
        self._write_meta(lambda: write_manifest(self.folder, self.manifest))

    def note_instrument(self, name: str, facts: dict[str, Any]) -> None:
        """What the start found out about instrument `name` (its dialect, how a clamp is told,
        the error entries left from before): kept in the session's record of the manifest."""
        self.manifest["sessions"][-1].setdefault("instruments", {})[name] = facts
        self._write_meta(lambda: write_manifest(self.folder, self.manifest))

    def finish(self, status: str, finished: str, identity: str = "", ended: str = "") -> str:
        """Record the end of this session and close the folder (the lock goes last). `ended`:
        how the session ended, in words (the last line on screen). Never raises: it runs on
        every way out; a problem is returned as text for the screen."""
        lost = self.lock.lost()
        if lost:  # the folder may be another run's now: its record is not ours to write
            self._close()
            return f"{self.folder}: end of run not recorded (the run's lock was taken away: {lost})"
        ends = {"status": status, "finished": finished}
        if identity:
            ends["identity"] = identity
        self.manifest.update(ends)
        session = {**ends, "ended": ended} if ended else ends
        self.manifest["sessions"][-1].update(session)
        problems = [
            self._try(lambda: self.manifest.update({RECORD_KEY: records(self.folder, self.db)}))
        ]
        problems += [
            self._try(lambda: dbase.update_run(self.db, self.run_id, **ends)),
            self._try(lambda: dbase.update_session(self.db, self.run_id, self.session, **session)),
            self._try(lambda: write_manifest(self.folder, self.manifest)),
        ]
        problems.append(self._close())
        found = [p for p in problems if p]
        return f"{self.folder}: end of run not recorded ({found[0]})" if found else ""

    def _close(self) -> str:
        """Close every file; the lock goes last, once nothing more is written."""
        problems = [self._try(close) for close in (self.db.close, self.journal.close)]
        problems += [self._try(self.csv_file.close), self._try(self.lock.release)]
        return next((p for p in problems if p), "")

    def _write_meta(self, write: Any) -> None:
        self.lock.check()
        problem = self._try(write)
        if problem:
            raise StoreError(f"{self.folder}: run record could not be written ({problem})")

    @staticmethod
    def _try(action: Any) -> str:
        try:
            action()
        except (OSError, sqlite3.Error) as exc:
            return getattr(exc, "strerror", None) or str(exc)
        return ""


def _reopen(
    folder: Path, run: dict[str, Any]
) -> tuple[sqlite3.Connection, int, Journal, IO[str], list[str]]:
    """The folder's files brought up to date from the journal, open again for writing."""
    db = None
    try:
        db, run_id, rebuilt = open_or_rebuild(folder, run)
        seq, torn = journal_notes(folder, db, run_id)
        applied = catch_up(db, run_id, folder, seq)
        csv_file = _rewrite_csv(folder, db, run_id)
        journal = Journal(folder / JOURNAL_FILE, last_seq=seq)
    except BaseException as exc:
        if db is not None:
            db.close()
        if isinstance(exc, OSError | sqlite3.Error):
            why = getattr(exc, "strerror", None) or str(exc)
            raise StoreError(f"{folder}: cannot be resumed ({why})") from None
        raise
    caught = f"{DATABASE_FILE} and {CSV_FILE} caught up with the journal" if applied else ""
    return db, run_id, journal, csv_file, [torn, rebuilt, caught]


def _rewrite_csv(folder: Path, db: sqlite3.Connection, run_id: int) -> IO[str]:
    """devices.csv from the database, replaced atomically; returned open for appending."""
    path, spare = folder / CSV_FILE, folder / (CSV_FILE + ".new")
    with open(spare, "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(RUN_CSV_COLUMNS)
        for row in dbase.device_rows(db, run_id, RUN_CSV_COLUMNS):
            writer.writerow([_csv(v) for v in row])
        f.flush()
        os.fsync(f.fileno())
    os.replace(spare, path)
    return open(path, "a", newline="", encoding="utf-8")


def _figure_sql() -> str:
    return ",\n    ".join(
        f"{c} {'INTEGER' if c.endswith('_at_least') else 'REAL'}" for c in figure_columns()
    )


def _points(curve: Curve) -> dict[str, list]:
    return {
        "step": [curve.steps[int(s)] for s in curve.segment],
        "level_V": encode_floats(curve.level_v.tolist()),
        "voltage_V": encode_floats(curve.voltage_v.tolist()),
        "current_A": encode_floats(curve.current_a.tolist()),
        "time_s": encode_floats(curve.time_s.tolist()),
        "in_compliance": curve.in_compliance.astype(int).tolist(),
    }


def _csv(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    return value
