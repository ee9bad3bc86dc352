"""The run folder: a journal line per device (flushed and fsynced) first, then SQLite, then CSV.

Layout of a run folder:
    journal.jsonl    one JSON object per device, the first place a result is written
    results.sqlite   tables run, device, point (schema version in PRAGMA user_version)
    devices.csv      one row per device, figures with their uncertainties beside them
    scpi.log         every SCPI exchange with a timestamp (written by the driver's spy)
"""

from __future__ import annotations

import csv
import json
import math
import os
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .curve import Curve
from .errors import StoreError
from .judge import Judgement
from .judgesettings import FIGURE_UNIT
from .recipe import FIGURES

# 2: bins (hard_bin, bin_class, soft_bin) and the reverse and peak figures in the device table
SCHEMA_VERSION = 2
UNITS = FIGURE_UNIT
BIN_COLUMNS = ["hard_bin", "bin_class", "soft_bin"]

SCHEMA = """
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
    hard_bin INTEGER, bin_class TEXT, soft_bin TEXT,
    classification TEXT, reasons TEXT,
    {figure_columns},
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


def figure_columns() -> list[str]:
    cols = []
    for name in FIGURES:
        unit = UNITS[name]
        cols += [f"{name}_{unit}", f"{name}_u_{unit}", f"{name}_at_least"]
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


def _num(x: float) -> float | None:
    return None if math.isnan(x) else x


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
    row["classification"] = judgement.classification
    row["reasons"] = "; ".join(judgement.notes)  # failing reasons, then guard-band notes
    return row


@dataclass
class RunStore:
    """An open run folder. Create it with `RunStore.create`, close it with `finish`."""

    folder: Path
    db: sqlite3.Connection
    run_id: int
    journal: Any
    csv_file: Any

    @classmethod
    def create(cls, folder: Path, manifest: dict[str, Any]) -> RunStore:
        if (folder / "journal.jsonl").exists():
            raise StoreError(f"{folder}: already holds a run; choose another --out folder")
        try:
            folder.mkdir(parents=True, exist_ok=True)
            db = sqlite3.connect(folder / "results.sqlite")
            db.execute("PRAGMA journal_mode=WAL")
            db.executescript(SCHEMA.replace("{figure_columns}", _figure_sql()))
            db.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
            keys = ", ".join(manifest)
            marks = ", ".join("?" for _ in manifest)
            with db:
                cur = db.execute(
                    f"INSERT INTO run (status, {keys}) VALUES ('running', {marks})",
                    list(manifest.values()),
                )
            journal = open(folder / "journal.jsonl", "a", encoding="utf-8")  # noqa: SIM115
            csv_file = open(folder / "devices.csv", "w", newline="", encoding="utf-8")  # noqa: SIM115
            csv.writer(csv_file).writerow(CSV_COLUMNS)
            csv_file.flush()
        except OSError as exc:
            raise StoreError(f"{folder}: cannot create the run folder ({exc.strerror})") from None
        except sqlite3.Error as exc:
            raise StoreError(f"{folder}/results.sqlite: cannot be created ({exc})") from None
        return cls(folder, db, int(cur.lastrowid or 0), journal, csv_file)

    def add_device(self, curve: Curve, judgement: Judgement) -> None:
        """Journal (fsync) first, then one SQLite transaction, then the CSV row."""
        row = device_row(judgement, curve.channel)
        try:
            self._journal(row, curve)
            self._database(row, curve)
            csv.writer(self.csv_file).writerow([_csv(row[c]) for c in CSV_COLUMNS])
            self.csv_file.flush()
        except OSError as exc:
            raise StoreError(
                f"{self.folder}: result of {curve.device} could not be written ({exc.strerror}); "
                "everything before it is kept"
            ) from None

    def _journal(self, row: dict[str, Any], curve: Curve) -> None:
        entry = dict(row, points=_points(curve))
        self.journal.write(json.dumps(entry, allow_nan=False, default=_json) + "\n")
        self.journal.flush()
        os.fsync(self.journal.fileno())

    def _database(self, row: dict[str, Any], curve: Curve) -> None:
        cols = ["run_id", *row]
        with self.db:
            self.db.execute(
                f"INSERT INTO device ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})",
                [self.run_id, *row.values()],
            )
            self.db.executemany(
                "INSERT INTO point VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [
                    (
                        self.run_id,
                        curve.device,
                        k,
                        curve.steps[int(curve.segment[k])],
                        float(curve.level_v[k]),
                        float(curve.voltage_v[k]),
                        float(curve.current_a[k]),
                        float(curve.time_s[k]),
                        int(curve.in_compliance[k]),
                    )
                    for k in range(len(curve))
                ],
            )

    def finish(self, status: str, finished: str, identity: str = "") -> None:
        try:
            with self.db:
                self.db.execute(
                    "UPDATE run SET status = ?, finished = ?, identity = COALESCE(NULLIF(?, ''), "
                    "identity) WHERE id = ?",
                    (status, finished, identity, self.run_id),
                )
        finally:
            self.db.close()
            self.journal.close()
            self.csv_file.close()

    def set_identity(self, resource: str, identity: str) -> None:
        with self.db:
            self.db.execute(
                "UPDATE run SET resource = ?, identity = ? WHERE id = ?",
                (resource, identity, self.run_id),
            )


def _figure_sql() -> str:
    return ",\n    ".join(
        f"{c} {'INTEGER' if c.endswith('_at_least') else 'REAL'}" for c in figure_columns()
    )


def _points(curve: Curve) -> dict[str, list]:
    return {
        "step": [curve.steps[int(s)] for s in curve.segment],
        "level_V": _finite(curve.level_v),
        "voltage_V": _finite(curve.voltage_v),
        "current_A": _finite(curve.current_a),
        "time_s": _finite(curve.time_s),
        "in_compliance": curve.in_compliance.astype(int).tolist(),
    }


def _finite(values) -> list[float | None]:
    """JSON has no infinity or NaN: an over-range reading is journalled as null."""
    return [v if math.isfinite(v) else None for v in values.tolist()]


def _json(value: Any) -> Any:
    raise TypeError(f"cannot journal {type(value).__name__}")


def _csv(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    return value
