"""After a run over temperatures: each device's temperature coefficient from its stored results
(the fixture sensor's reading where the station has one, since the mount is where the device is;
else the chamber's), judged against the recipe's limits, written to tempco.csv in the run folder.
"""

from __future__ import annotations

import csv
import math
import sqlite3
from pathlib import Path

from sequencer.judge.devicetempco import DeviceTempCo, TempCoLimits, device_tempcos
from sequencer.store.runstore import DATABASE_FILE

TEMPCO_FILE = "tempco.csv"
COLUMNS = ["device", "points", "tempco_A_per_K", "tempco_u_A_per_K", "tempco_pct_per_K",
           "tempco_u_pct_per_K", "regulated_current_at_25C_A", "verdict", "reason"]  # fmt: skip


def temperature_rows(db: sqlite3.Connection, run_id: int) -> list[tuple]:
    query = (
        "SELECT device, COALESCE(fixture_C, chamber_C), regulated_current_A, "
        "regulated_current_u_A FROM device WHERE run_id = ? AND chamber_C IS NOT NULL "
        "AND regulated_current_A IS NOT NULL ORDER BY seq"
    )
    return db.execute(query, (run_id,)).fetchall()


def write_tempcos(folder: Path, run_id: int, limits: TempCoLimits) -> list[DeviceTempCo]:
    """The coefficients of run `run_id` in the folder's database, also written to tempco.csv."""
    db = sqlite3.connect(folder / DATABASE_FILE)
    try:
        results = device_tempcos(temperature_rows(db, run_id), limits)
    finally:
        db.close()
    with open(folder / TEMPCO_FILE, "w", encoding="utf-8", newline="") as file:
        writer = csv.writer(file)
        writer.writerow(COLUMNS)
        for r in results:
            writer.writerow([r.device, *_figures(r), r.verdict, r.reason])
    return results


def _figures(r: DeviceTempCo) -> list[object]:
    fit = r.fit
    if fit is None:
        return ["", "", "", "", "", ""]
    values = [fit.a_per_k, fit.u_a_per_k, fit.pct_per_k, fit.u_pct_per_k, fit.value_at_ref]
    return [fit.points, *("" if not math.isfinite(v) else f"{v:.6g}" for v in values)]
