"""The results.sqlite schema as a list of forward steps; PRAGMA user_version says how far a file is.

A new database runs every step from 0, an old one the steps it lacks, so there is one path to
each version and a file written by any earlier ccbench opens in this one. Each step is frozen
once released: a change to the schema is a new step at the end, never an edit of an old one.
Each step runs in one transaction with the version bump, so a crash mid-step leaves the file at
the version before it.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable, Iterator
from contextlib import contextmanager, suppress

from sequencer.model.errors import StoreError
from sequencer.model.judgesettings import FIGURES

# Version 1, as the first release wrote it (four figures, one device per lot position).
V1 = """
CREATE TABLE run (
    id INTEGER PRIMARY KEY,
    started TEXT NOT NULL, finished TEXT, status TEXT NOT NULL,
    product TEXT, lot TEXT, operator TEXT, host TEXT, software_version TEXT,
    recipe_file TEXT, recipe_sha256 TEXT, recipe_text TEXT,
    station TEXT, station_text TEXT, resource TEXT, identity TEXT, simulator TEXT
);
CREATE TABLE device (
    run_id INTEGER NOT NULL REFERENCES run(id),
    device TEXT NOT NULL, channel INTEGER, verdict TEXT NOT NULL,
    classification TEXT, reasons TEXT,
    regulated_current_A REAL, regulated_current_u_A REAL, regulated_current_at_least INTEGER,
    limiting_voltage_V REAL, limiting_voltage_u_V REAL, limiting_voltage_at_least INTEGER,
    dynamic_impedance_ohm REAL, dynamic_impedance_u_ohm REAL, dynamic_impedance_at_least INTEGER,
    knee_impedance_ohm REAL, knee_impedance_u_ohm REAL, knee_impedance_at_least INTEGER,
    PRIMARY KEY (run_id, device)
);
CREATE TABLE point (
    run_id INTEGER NOT NULL, device TEXT NOT NULL, idx INTEGER NOT NULL,
    step TEXT, level_V REAL, voltage_V REAL, current_A REAL, time_s REAL,
    in_compliance INTEGER,
    PRIMARY KEY (run_id, device, idx),
    FOREIGN KEY (run_id, device) REFERENCES device(run_id, device)
);
"""


def _v1(db: sqlite3.Connection) -> None:
    for statement in V1.split(";"):
        if statement.strip():
            db.execute(statement)


def _v2(db: sqlite3.Connection) -> None:
    """Bins, and the reverse and peak figures (each with its uncertainty and lower-bound flag)."""
    columns = ["hard_bin INTEGER", "bin_class TEXT", "soft_bin TEXT"]
    for name, unit in (("reverse_current", "A"), ("peak_current", "A"), ("peak_dissipation", "W")):
        columns += [f"{name}_{unit} REAL", f"{name}_u_{unit} REAL", f"{name}_at_least INTEGER"]
    for column in columns:
        db.execute(f"ALTER TABLE device ADD COLUMN {column}")


def _v3(db: sqlite3.Connection) -> None:
    """Repeated passes (the pass number joins the device key), sessions (each start or resume
    of a run, with the instrument and recipe it ran under), and the journal's sequence number
    and time of each device."""
    for column in ("uid TEXT", "simulator_seed INTEGER", "schedule TEXT"):
        db.execute(f"ALTER TABLE run ADD COLUMN {column}")
    db.execute(
        """CREATE TABLE session (
            run_id INTEGER NOT NULL REFERENCES run(id), session INTEGER NOT NULL,
            started TEXT NOT NULL, finished TEXT, status TEXT NOT NULL,
            pid INTEGER, host TEXT, operator TEXT, software_version TEXT,
            recipe_sha256 TEXT, recipe_text TEXT, station_text TEXT,
            resource TEXT, identity TEXT,
            PRIMARY KEY (run_id, session))"""
    )
    db.execute(
        """INSERT INTO session (run_id, session, started, finished, status, host, operator,
            software_version, recipe_sha256, recipe_text, station_text, resource, identity)
        SELECT id, 1, started, finished, status, host, operator, software_version,
            recipe_sha256, recipe_text, station_text, resource, identity FROM run"""
    )
    added = ["pass INTEGER NOT NULL DEFAULT 1", "session INTEGER NOT NULL DEFAULT 1"]
    added += ["seq INTEGER", "measured TEXT", "pass_started TEXT"]
    _rekey(db, "device", added, "run_id, pass, device", "")
    fk = ", FOREIGN KEY (run_id, pass, device) REFERENCES device(run_id, pass, device)"
    _rekey(db, "point", ["pass INTEGER NOT NULL DEFAULT 1"], "run_id, pass, device, idx", fk)
    db.execute("UPDATE device SET seq = rowid")
    db.execute("CREATE INDEX device_by_seq ON device (run_id, seq)")


def _rekey(db: sqlite3.Connection, table: str, added: list[str], key: str, extra: str) -> None:
    """Copy `table` into a new one with `added` columns and primary key `key` (SQLite cannot
    change a key in place); every column it had is carried over, whatever later steps added."""
    old = [(row[1], row[2]) for row in db.execute(f"PRAGMA table_info({table})")]
    columns = [f"{name} {kind}" for name, kind in old] + added
    db.execute(f"CREATE TABLE {table}_new ({', '.join(columns)}, PRIMARY KEY ({key}){extra})")
    names = ", ".join(name for name, _ in old)
    db.execute(f"INSERT INTO {table}_new ({names}) SELECT {names} FROM {table}")
    db.execute(f"DROP TABLE {table}")
    db.execute(f"ALTER TABLE {table}_new RENAME TO {table}")


def _v4(db: sqlite3.Connection) -> None:
    """Part-by-part testing: whether an attempt became its part's result when it was stored
    (1 or 0; NULL for a device of a tray run, which is its own result). sequencer.recipe.retest"""
    db.execute("ALTER TABLE device ADD COLUMN standing INTEGER")


def _v5(db: sqlite3.Connection) -> None:
    """How each session ended, in words: the run's last line on screen (what stopped it, how
    the output was left), kept where the screen may have been gone (a closed terminal)."""
    db.execute("ALTER TABLE session ADD COLUMN ended TEXT")


def _v6_temperatures(db: sqlite3.Connection) -> None:
    """Characterisation over temperature: the chamber set point a device was measured at, and
    what the chamber's and the fixture's sensors read once it was stable (degC; NULL for a run
    without a chamber, or a station without a fixture sensor). sequencer.run.soak"""
    for column in ("set_point_C", "chamber_C", "fixture_C"):
        db.execute(f"ALTER TABLE device ADD COLUMN {column} REAL")


def _coverage_factors(db: sqlite3.Connection) -> None:
    """Per figure the coverage factor k of U = k u and the effective degrees of freedom of u
    (JCGM 100:2008 G.4); NULL in devices judged before (they used the recipe's fixed k)."""
    for name in FIGURES:
        db.execute(f"ALTER TABLE device ADD COLUMN {name}_k REAL")
        db.execute(f"ALTER TABLE device ADD COLUMN {name}_dof REAL")


def _rounds(db: sqlite3.Connection) -> None:
    """The repetition number is called `round`, a word no one reads as a verdict (it was
    `pass`, beside the verdict "pass"); SQLite carries the rename into keys and indexes."""
    for table, old, new in RENAMED:
        have = {row[1] for row in db.execute(f"PRAGMA table_info({table})")}
        if old in have:  # rejudge_device exists only where a run was re-judged
            db.execute(f'ALTER TABLE {table} RENAME COLUMN "{old}" TO "{new}"')


# (table, name up to version 7, name from version 8)
RENAMED = (
    ("device", "pass", "round"),
    ("device", "pass_started", "round_started"),
    ("point", "pass", "round"),
    ("rejudge_device", "pass", "round"),
)


MIGRATIONS: tuple[Callable[[sqlite3.Connection], None], ...] = (
    _v1,
    _v2,
    _v3,
    _v4,
    _v5,
    _v6_temperatures,
    _coverage_factors,
    _rounds,
)
LATEST = len(MIGRATIONS)


def version(db: sqlite3.Connection) -> int:
    return int(db.execute("PRAGMA user_version").fetchone()[0])


def migrate(db: sqlite3.Connection, where: str) -> tuple[int, int]:
    """Bring `db` to LATEST, one transaction per step; returns (version before, after).
    A file from a newer ccbench is refused: its steps are unknown here."""
    before = version(db)
    if before > LATEST:
        raise StoreError(
            f"{where}: schema version {before} is newer than this ccbench knows ({LATEST}); "
            "open it with a newer ccbench"
        )
    for number in range(before + 1, LATEST + 1):
        with transaction(db):
            MIGRATIONS[number - 1](db)
            db.execute(f"PRAGMA user_version = {number}")
    return before, LATEST


@contextmanager
def transaction(db: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """One explicit transaction (connections are opened in autocommit mode, isolation_level
    None, so that what is inside a transaction is what this block says)."""
    db.execute("BEGIN IMMEDIATE")
    try:
        yield db
    except BaseException:
        if db.in_transaction:  # SQLite may have rolled back already (a full disk, for one)
            with suppress(sqlite3.Error):
                db.execute("ROLLBACK")
        raise
    db.execute("COMMIT")
