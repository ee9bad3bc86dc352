"""`ccbench results --database URL`: the shared database's devices as the table run folders give.

The columns are those of `export.merge_runs` (run columns renamed the same way, then every
device column), so the runs, devices and yield tables and the CSV/Parquet output work on either
store. `folder` names the station and the run (`FLC-bench-P1 3f2a9c1e`): the shared database
does not know where a station keeps its folders. Filters run in the database.
"""

from __future__ import annotations

import pandas as pd

from sequencer.recipe.resultsdb import SharedDatabase
from sequencer.store.export import RUN_COLUMNS, Filter


def load_shared(database: SharedDatabase, keep: Filter | None = None) -> pd.DataFrame:
    """Every device row of the shared database that passes the filter, in the order measured."""
    from sequencer.store.shared import pgstore  # start-up speed: psycopg only when used

    with pgstore.connect(database.url) as conn:
        version = pgstore.version_or_none(conn)
        if version is None:
            return pd.DataFrame(columns=["folder", "run", "lot", "product", "device", "round"])
        device_columns = [c for c in pgstore.columns(conn, "device") if c != "run_id"]
        picked = [f"run.{pgstore.q(c)} AS {pgstore.q(n)}" for c, n in RUN_COLUMNS.items()]
        wanted = [f"device.{pgstore.q(c)}" for c in device_columns]
        where, params = _conditions(keep or Filter())
        sql = (
            f"SELECT {', '.join(picked + wanted)} FROM device JOIN run ON device.run_id = run.id"
            f'{where} ORDER BY device.measured, run.id, device."round", device.seq'
        )
        names, rows = pgstore.query(conn, sql, params)
    frame = pd.DataFrame(rows, columns=names)
    folder = frame["station"].fillna("?").astype(str) + " " + frame["run"].fillna("").str[:8]
    frame.insert(0, "folder", folder)
    return frame


def _conditions(keep: Filter) -> tuple[str, list[object]]:
    clauses: list[str] = []
    params: list[object] = []
    if not keep.dry_runs:  # a dry run's yield is not a production yield
        clauses.append("run.simulator IS NULL")  # a dry run names its simulator's settings
    for column, pattern in (("lot", keep.lot), ("product", keep.product)):
        if pattern is not None:
            clauses.append(f"run.{column} ILIKE %s")
            params.append(_like(pattern))
    if keep.verdict is not None:
        clauses.append("device.verdict = %s")
        params.append(keep.verdict)
    if keep.since is not None:  # ISO 8601 text in UTC sorts as the time it names
        clauses.append("device.measured >= %s")
        params.append(keep.since.isoformat(timespec="milliseconds"))
    return (" WHERE " + " AND ".join(clauses) if clauses else ""), params


def _like(pattern: str) -> str:
    """A shell wildcard as an SQL LIKE pattern (`*` any text, `?` one character)."""
    escaped = pattern.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return escaped.replace("*", "%").replace("?", "_")
