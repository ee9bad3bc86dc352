"""Run folders as one pandas table: every stored device with the run it belongs to.

Files are only read here, never migrated or otherwise changed: a run folder of any schema
version is read with the columns it has (a file from before repeated rounds has round 1;
`pass`, the round's name before schema 8, is read as `round`).
Written out as CSV or as Parquet (pyarrow), in the same columns.
"""

from __future__ import annotations

import datetime as dt
import fnmatch
import sqlite3
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from sequencer.model.errors import RecipeError, StoreError, StoreReadError
from sequencer.store.crosscheck import check_folder
from sequencer.store.frames import read_frame
from sequencer.store.oldnames import current_frame, round_column
from sequencer.store.readonly import open_for_reading

DATABASE_FILE = "results.sqlite"
RUN_COLUMNS = {  # column of the run table -> its name in the merged table
    "uid": "run",
    "lot": "lot",
    "product": "product",
    "station": "station",
    "operator": "operator",
    "started": "run_started",
    "status": "run_status",
    "identity": "identity",
    "recipe_sha256": "recipe_sha256",
}


@dataclass(frozen=True)
class Filter:
    """Which devices to keep. Lot and product take shell wildcards (`FK2611-*`), matched
    without regard to case; `since` keeps devices measured at or after it."""

    lot: str | None = None
    product: str | None = None
    since: dt.datetime | None = None
    verdict: str | None = None
    dry_runs: bool = False  # the shared database: runs on the simulator only when asked for


def find_runs(folders: Iterable[Path], under: Path | None = None) -> list[Path]:
    """The named run folders, and every run folder below `under`, in path order."""
    found = []
    for folder in folders:
        if not (folder / DATABASE_FILE).is_file():
            raise StoreError(f"{folder}: not a run folder (no {DATABASE_FILE})")
        found.append(folder)
    if under is not None:
        if not under.is_dir():
            raise StoreError(f"{under}: no such folder")
        found += sorted(p.parent for p in under.rglob(DATABASE_FILE))
    return list(dict.fromkeys(found))


def load_run(folder: Path) -> pd.DataFrame:
    """Every device of one run folder with its run's columns, in the order measured."""
    path = folder / DATABASE_FILE
    try:
        db = open_for_reading(path)
        try:
            check_folder(folder, db)
            return _query(db, folder)
        finally:
            db.close()
    except (sqlite3.Error, pd.errors.DatabaseError) as exc:
        raise StoreReadError(f"{path}: cannot be read ({exc})") from None


def _query(db: sqlite3.Connection, folder: Path) -> pd.DataFrame:
    run_cols = {row[1] for row in db.execute("PRAGMA table_info(run)")}
    picked = [f"run.{c} AS {name}" for c, name in RUN_COLUMNS.items() if c in run_cols]
    device_cols = [row[1] for row in db.execute("PRAGMA table_info(device)")]
    if not run_cols or not device_cols:  # an empty file, or a killed run's WAL lost
        missing = "run" if not run_cols else "device"
        raise sqlite3.DatabaseError(f"no {missing} table: the file is empty or damaged")
    rounds = round_column(db)
    order = f'device."{rounds}", device.seq' if rounds and "seq" in device_cols else "device.rowid"
    wanted = [f'device."{c}"' for c in device_cols if c != "run_id"]
    frame = read_frame(
        db,
        f"SELECT {', '.join(picked + wanted)} FROM device JOIN run ON device.run_id = run.id "
        f"ORDER BY run.id, {order}",
    )
    frame = current_frame(frame)
    frame.insert(0, "folder", str(folder))
    if "round" not in frame:
        frame.insert(frame.columns.get_loc("device") + 1, "round", 1)
    if "run" not in frame:
        frame.insert(0, "run", folder.name)
    return frame


def merge_runs(folders: Iterable[Path], keep: Filter = Filter()) -> pd.DataFrame:
    """One table of the devices of every folder that pass the filter (one run at a time in
    memory besides the result)."""
    parts = [select(load_run(folder), keep) for folder in folders]
    parts = [p for p in parts if not p.empty]
    if not parts:
        return pd.DataFrame(columns=["folder", "run", "lot", "product", "device", "round"])
    return pd.concat(parts, ignore_index=True)


def select(frame: pd.DataFrame, keep: Filter) -> pd.DataFrame:
    mask = pd.Series(True, index=frame.index)
    for column, pattern in (("lot", keep.lot), ("product", keep.product)):
        if pattern is not None:
            mask &= frame[column].fillna("").map(lambda v, p=pattern: _matches(v, p))
    if keep.verdict is not None:
        mask &= frame["verdict"] == keep.verdict
    if keep.since is not None:
        mask &= _when(frame) >= pd.Timestamp(keep.since)
    return frame[mask]


def _matches(value: str, pattern: str) -> bool:
    return fnmatch.fnmatchcase(str(value).casefold(), pattern.casefold())


def _when(frame: pd.DataFrame) -> pd.Series:
    """When each device was measured (the run's start for files that lack the time)."""
    measured = frame["measured"] if "measured" in frame else frame["run_started"]
    stamps = measured.fillna(frame["run_started"])
    return pd.to_datetime(stamps, utc=True, format="ISO8601", errors="coerce")


def parse_since(text: str) -> dt.datetime:
    """A date or date-time in ISO 8601; without a zone it is local time."""
    try:
        when = dt.datetime.fromisoformat(text)
    except ValueError:
        raise RecipeError(
            "command line", None, "--since", f"must be a date like 2026-05-01 (got {text!r})"
        ) from None
    if when.tzinfo is None:
        when = when.astimezone()  # local time, as the operator reads the clock
    return when.astimezone(dt.UTC)


def write_table(frame: pd.DataFrame, path: Path, kind: str) -> None:
    """Write the merged table as 'csv' or 'parquet' (pyarrow)."""
    try:
        if kind == "parquet":
            frame.to_parquet(path, engine="pyarrow", index=False)
        else:
            frame.to_csv(path, index=False)
    except OSError as exc:
        raise StoreError(f"{path}: cannot be written ({exc.strerror or exc})") from None
