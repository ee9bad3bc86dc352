"""A query's rows as one pandas table, read a chunk at a time: a whole table's rows as Python
tuples take some ten times the memory of the table they become, so a lot of 100,000 devices
is read with only a chunk of them in flight. The column types are those one reading of the
whole result gives (tests/report/test_report_data.py)."""

from __future__ import annotations

import sqlite3

import pandas as pd

CHUNK = 10_000  # rows in flight


def read_frame(db: sqlite3.Connection, sql: str, chunk: int | None = None) -> pd.DataFrame:
    chunks = list(pd.read_sql_query(sql, db, chunksize=chunk or CHUNK))
    if len(chunks) <= 1:
        return chunks[0] if chunks else pd.read_sql_query(sql, db)
    frame = pd.concat(chunks, ignore_index=True)
    for column in frame.columns[frame.dtypes == "object"]:
        known = frame[column].dropna()
        numbers = known.map(lambda v: isinstance(v, int | float) and not isinstance(v, bool))
        if len(known) and numbers.all():  # a chunk of NULLs only came back as objects
            frame[column] = pd.to_numeric(frame[column])
    return frame
