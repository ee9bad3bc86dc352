"""One row per run of a merged device table: what `ccbench results` shows of each run, on screen
and in --json."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pandas is imported when the command runs, not on every ccbench start
    import pandas as pd


@dataclass(frozen=True)
class RunRow:
    """One run of the merged table, as the runs table and --json show it."""

    folder: str
    lot: str
    started: str
    status: str
    devices: int
    rounds: int
    passed: int
    failed: int

    @property
    def judged_yield(self) -> float:
        """pass over pass + fail (NaN with neither)."""
        judged = self.passed + self.failed
        return self.passed / judged if judged else math.nan


def run_rows(frame: pd.DataFrame) -> list[RunRow]:
    if frame.empty:
        return []
    rows = []
    for folder, group in frame.groupby("folder", sort=False):
        verdicts = group["verdict"].value_counts()
        rows.append(
            RunRow(
                str(folder),
                _text(group["lot"].iloc[0]),
                _text(group["run_started"].iloc[0]),
                _text(group["run_status"].iloc[0]),
                len(group),
                int(group["round"].nunique()),
                int(verdicts.get("pass", 0)),
                int(verdicts.get("fail", 0)),
            )
        )
    return rows


def _text(value: object) -> str:
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)
