"""Re-decide a stored run under a new recipe from the points in its results.sqlite.

No instrument is touched and nothing stored is changed: each re-judgement adds one row to the
table `rejudge` and its devices to `rejudge_device` in results.sqlite, and writes
`rejudged-<id>.csv` beside devices.csv. Devices that were interrupted stay aborted: there is no
complete curve to judge. The kind of each step (sweep or spot) is read from the stored levels:
a sweep always has at least two levels, a spot one.

The measurement uncertainty is that of the station the run was measured on (its text is
stored with the run), unless the caller names another station.
"""

from __future__ import annotations

import csv
import os
import sqlite3
from collections import Counter
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from sequencer.judge.engine import MISSING, Judgement, with_bin
from sequencer.judge.lotjudge import judge_lot
from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy
from sequencer.model.curve import Curve
from sequencer.model.errors import RecipeError, StoreError, StoreReadError
from sequencer.model.judgesettings import FIGURES, JudgeSettings
from sequencer.recipe.load import Recipe
from sequencer.recipe.yamlsource import parse_yaml
from sequencer.store.crosscheck import check_folder
from sequencer.store.oldnames import round_column
from sequencer.store.readonly import read_only_place as _read_only_place
from sequencer.store.runstore import CSV_COLUMNS, SCHEMA_VERSION, _csv, _figure_sql, device_row

REJUDGE_SCHEMA = """
CREATE TABLE IF NOT EXISTS rejudge (
    id INTEGER PRIMARY KEY, run_id INTEGER NOT NULL, created TEXT NOT NULL,
    recipe_file TEXT, recipe_sha256 TEXT, recipe_text TEXT, accuracy_from TEXT
);
CREATE TABLE IF NOT EXISTS rejudge_device (
    rejudge_id INTEGER NOT NULL REFERENCES rejudge(id),
    device TEXT NOT NULL, round INTEGER NOT NULL DEFAULT 1, channel INTEGER,
    verdict TEXT NOT NULL, hard_bin INTEGER, bin_class TEXT, soft_bin TEXT,
    {figure_columns},
    classification TEXT, reasons TEXT, original_verdict TEXT,
    PRIMARY KEY (rejudge_id, round, device)
);
"""


@dataclass(frozen=True)
class StoredDevice:
    curve: Curve
    verdict: str
    reasons: str
    round_number: int = 1  # a repeated run measures each device once per round


@dataclass(frozen=True)
class StoredRun:
    folder: Path
    run_id: int
    status: str
    station_text: str
    devices: tuple[StoredDevice, ...]

    @property
    def database(self) -> Path:
        return self.folder / "results.sqlite"


def _connect(folder: Path) -> sqlite3.Connection:
    path = folder / "results.sqlite"
    if not path.is_file():
        raise StoreError(f"{folder}: not a run folder (no results.sqlite)")
    try:
        db = sqlite3.connect(path)
        version = db.execute("PRAGMA user_version").fetchone()[0]
    except sqlite3.Error as exc:
        if _read_only_place(path):
            raise StoreError(
                f"{folder}: is on a read-only file system; a re-judgement is stored beside the "
                "results, so copy the folder somewhere writable and re-judge the copy"
            ) from None
        raise StoreReadError(f"{path}: cannot be read ({exc})") from None
    if version > SCHEMA_VERSION:
        db.close()
        raise StoreError(f"{path}: schema {version} is newer than this ccbench ({SCHEMA_VERSION})")
    return db


def load_run(folder: Path) -> StoredRun:
    db = _connect(folder)
    try:
        check_folder(folder, db)
        run = db.execute("SELECT id, status, station_text FROM run ORDER BY id DESC").fetchone()
        if run is None:
            raise StoreError(f"{folder}/results.sqlite: holds no run")
        run_id, status, station_text = run
        # Folders older than schema 3 have one round and no round column; 3 to 7 call it pass.
        rounds = round_column(db)
        number = f'"{rounds}"' if rounds else "1"
        devices = db.execute(
            f"SELECT {number}, device, channel, verdict, reasons FROM device WHERE run_id = ? "
            "ORDER BY rowid",
            (run_id,),
        ).fetchall()
        points = db.execute(
            f"SELECT {number}, device, step, level_V, voltage_V, current_A, time_s, "
            f"in_compliance FROM point WHERE run_id = ? ORDER BY {number}, device, idx"
            if rounds
            else "SELECT 1, device, step, level_V, voltage_V, current_A, time_s, in_compliance "
            "FROM point WHERE run_id = ? ORDER BY device, idx",
            (run_id,),
        ).fetchall()
    except sqlite3.Error as exc:
        raise StoreReadError(f"{folder}/results.sqlite: cannot be read ({exc})") from None
    finally:
        db.close()
    curves = _curves([row[1:] for row in devices], points, [row[0] for row in devices])
    stored = tuple(StoredDevice(curves[(p, d)], v, r or "", int(p)) for p, d, _, v, r in devices)
    return StoredRun(folder, run_id, status, station_text or "", stored)


def _curves(devices: list, points: list, rounds: list) -> dict[tuple[int, str], Curve]:
    """Curves keyed by (round, device); each point row starts with its round number."""
    steps: list[str] = []
    per_device: dict[tuple[int, str], list] = {
        (p, d): [] for p, (d, *_) in zip(rounds, devices, strict=True)
    }
    for row in points:
        if row[2] not in steps:
            steps.append(row[2])
        per_device.setdefault((row[0], row[1]), []).append(row[1:])
    levels: dict[str, set] = {name: set() for name in steps}
    for row in points:
        levels[row[2]].add(row[3])
    kinds = tuple("sweep" if len(levels[s]) > 1 else "spot" for s in steps)
    channel = {d: c for d, c, *_ in devices}
    return {
        key: _curve(key[1], channel.get(key[1], 0), rows, tuple(steps), kinds)
        for key, rows in per_device.items()
    }


def _curve(device: str, channel: int, rows: list, steps: tuple, kinds: tuple) -> Curve:
    def column(k: int) -> np.ndarray:
        return np.array([np.nan if r[k] is None else r[k] for r in rows], float)

    return Curve(
        device,
        int(channel or 0),
        steps,
        kinds,
        np.array([steps.index(r[1]) for r in rows], int),
        column(2),
        column(3),
        column(4),
        column(5),
        np.array([bool(r[6]) for r in rows], bool),
    )


def stored_accuracy(run: StoredRun) -> Accuracy:
    """The accuracy section of the station text stored with the run (defaults if none)."""
    if not run.station_text.strip():
        return DEFAULT_ACCURACY
    source = parse_yaml(run.station_text, f"{run.database} (station stored with the run)")
    data = source.data if isinstance(source.data, dict) else {}
    # Start-up speed: the station format builds pydantic models at import; only this reads it.
    from sequencer.recipe.stationbuild import parse_accuracy

    return parse_accuracy(source, data.get("accuracy"))


def rejudge(run: StoredRun, settings: JudgeSettings) -> list[Judgement]:
    """New judgements for every stored device, in the stored order."""
    complete = [d.curve for d in run.devices if d.verdict != "aborted"]
    judged = iter(judge_lot(complete, settings))
    out = []
    for device in run.devices:
        if device.verdict == "aborted":
            kept = Judgement(
                device.curve.device, dict.fromkeys(FIGURES, MISSING), "aborted", (device.reasons,)
            )
            out.append(with_bin(kept, settings))
        else:
            out.append(next(judged))
    return out


def settings_for(recipe: Recipe, run: StoredRun, own_station: bool) -> tuple[JudgeSettings, str]:
    """The new recipe's judge, with the accuracy of the measuring station unless overridden."""
    if own_station:
        return recipe.judge, recipe.station.file
    try:
        accuracy = stored_accuracy(run)
    except RecipeError as exc:
        raise StoreError(f"stored station text: {exc}") from None
    return replace(recipe.judge, accuracy=accuracy), "station stored with the run"


def save(
    run: StoredRun, judgements: list[Judgement], recipe: Recipe, accuracy_from: str, now: str
) -> Path:
    """Record a re-judgement beside the original results; returns the new CSV file."""
    db = _connect(run.folder)
    try:
        with db:
            db.executescript(REJUDGE_SCHEMA.replace("{figure_columns}", _figure_sql()))
            cur = db.execute(
                "INSERT INTO rejudge (run_id, created, recipe_file, recipe_sha256, recipe_text, "
                "accuracy_from) VALUES (?, ?, ?, ?, ?, ?)",
                (run.run_id, now, recipe.file, recipe.digest, recipe.text, accuracy_from),
            )
            rejudge_id = int(cur.lastrowid or 0)
            rows = _rows(run, judgements)
            named = round_column(db, "rejudge_device")  # `pass` in a table made before schema 8
            if named and named != "round":
                rows = [{named if k == "round" else k: v for k, v in row.items()} for row in rows]
            cols = ["rejudge_id", *rows[0]] if rows else []
            marks = ", ".join("?" * len(cols))
            db.executemany(
                f"INSERT INTO rejudge_device ({', '.join(cols)}) VALUES ({marks})",
                [[rejudge_id, *row.values()] for row in rows],
            )
            # Written under a working name inside the transaction, named only once committed:
            # a crash between the two leaves no CSV claiming a re-judgement the database lacks.
            part = run.folder / f".rejudged-{rejudge_id}.csv.part"
            _write_csv(part, rows)
        path = _publish(part, run.folder / f"rejudged-{rejudge_id}.csv", now)
    except sqlite3.Error as exc:
        raise StoreError(f"{run.database}: the re-judgement could not be stored ({exc})") from None
    finally:
        db.close()
    return path


def _rows(run: StoredRun, judgements: list[Judgement]) -> list[dict]:
    rows = []
    for device, judgement in zip(run.devices, judgements, strict=True):
        row = device_row(judgement, device.curve.channel)
        row = {"device": row.pop("device"), "round": device.round_number, **row}
        row["original_verdict"] = device.verdict
        rows.append(row)
    return rows


def _publish(part: Path, path: Path, now: str) -> Path:
    """Give the committed CSV its name. A file already there is left by an older version's
    crash (its re-judgement rolled back, so its number came round again): kept, renamed."""
    try:
        if path.exists():
            stamp = "".join(c for c in now if c.isdigit())
            path.rename(path.with_name(f"{path.stem}.orphan-{stamp}.csv"))
        os.replace(part, path)
    except OSError as exc:
        raise StoreError(f"{path}: cannot be written ({exc.strerror})") from None
    return path


def _write_csv(path: Path, rows: list[dict]) -> None:
    columns = ["device", "round", *CSV_COLUMNS[1:], "original_verdict"]
    try:
        with open(path, "w", newline="", encoding="utf-8") as f:
            out = csv.writer(f)
            out.writerow(columns)
            out.writerows([_csv(row[c]) for c in columns] for row in rows)
    except OSError as exc:
        raise StoreError(f"{path}: cannot be written ({exc.strerror})") from None


def changes(run: StoredRun, judgements: list[Judgement]) -> Counter:
    """How many devices went from which stored verdict to which new one."""
    return Counter(
        (d.verdict, j.verdict)
        for d, j in zip(run.devices, judgements, strict=True)
        if d.verdict != j.verdict
    )
