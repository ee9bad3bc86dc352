"""One or more run folders as pandas tables, for the lot reports. The only module of the
reports that reads a run folder.

Tables are read by column name (`SELECT *`), so columns the store adds later are carried along
and columns an older schema lacks are filled in. A device measured more than once (a retest in
a later run folder of the same lot, or a later pass in one folder) keeps every row in
`devices`; the last one is its result (`final`). Points are matched to their device row by every
column the point and device tables share (today run and device; a pass number tomorrow).

The limits, decision rule and bins come from the recipe text stored with each run, so a
report shows what the devices were judged against, not what a recipe file says today.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from sequencer.model.errors import CcbenchError, RecipeError, StoreError, StoreReadError
from sequencer.model.judgesettings import FIGURE_UNIT, FIGURES, FigureLimit, JudgeSettings
from sequencer.recipe.yamlsource import parse_yaml
from sequencer.store.yields import final_mask

RUN_TEXT = (
    "lot", "product", "status", "started", "finished", "station", "identity", "operator",
    "host", "software_version", "recipe_file", "recipe_sha256", "recipe_text", "resource",
    "simulator",
)  # fmt: skip
POINT_COLUMNS = ("step", "level_V", "voltage_V", "current_A", "time_s", "in_compliance")


class ReportError(CcbenchError, ValueError):
    """A report was asked for something the run folders do not hold (a device, a lot)."""

    exit_code = 2


def value_column(figure: str) -> str:
    return f"{figure}_{FIGURE_UNIT[figure]}"


def u_column(figure: str) -> str:
    return f"{figure}_u_{FIGURE_UNIT[figure]}"


def bound_column(figure: str) -> str:
    return f"{figure}_at_least"


@dataclass(frozen=True, eq=False)
class FigureData:
    """One figure over the final devices: plain values apart from lower bounds."""

    figure: str
    devices: np.ndarray  # names, aligned with the arrays below
    value: np.ndarray
    u: np.ndarray
    at_least: np.ndarray

    @property
    def plain(self) -> np.ndarray:
        """Known values that are not lower bounds: what statistics may use."""
        return self.value[np.isfinite(self.value) & ~self.at_least]


@dataclass(frozen=True, eq=False)
class Lot:
    """What the reports work from. `runs`: one row per run (column `run` is its index);
    `devices`: every stored device row in test order, with `run`, `row` and `final`;
    `points`: every reading with the `row` of its device."""

    runs: pd.DataFrame
    devices: pd.DataFrame
    points: pd.DataFrame
    settings: JudgeSettings
    step_kinds: dict[str, str]
    notes: tuple[str, ...]

    @property
    def final(self) -> pd.DataFrame:
        return self.devices[self.devices["final"]]

    @property
    def name(self) -> str:
        return ", ".join(dict.fromkeys(str(x) for x in self.runs["lot"] if x)) or "(no lot)"

    @property
    def product(self) -> str:
        return ", ".join(dict.fromkeys(str(x) for x in self.runs["product"] if x))

    def limit(self, figure: str) -> FigureLimit:
        return self.settings.limit(figure)

    def figure(self, figure: str) -> FigureData:
        d = self.final
        return FigureData(
            figure,
            d["device"].to_numpy(str),
            d[value_column(figure)].to_numpy(float),
            d[u_column(figure)].to_numpy(float),
            d[bound_column(figure)].to_numpy(bool),
        )

    def expanded(self, figure: str) -> np.ndarray:
        """U = k u of each final device under the guarded rule (inf where u is unknown, as the
        judge takes it); zeros under simple acceptance."""
        u = self.final[u_column(figure)].to_numpy(float)
        if self.settings.decision != "guarded":
            return np.zeros(len(u))
        return np.where(np.isnan(u), np.inf, self.coverage_factor(figure) * u)

    def coverage_factor(self, figure: str) -> np.ndarray:
        """k of each final device as the judge used it; a device stored before k was kept
        was judged with the recipe's fixed k (2 when the recipe named none)."""
        column = f"{figure}_k"
        stored = self.final[column].to_numpy(float) if column in self.final else None
        fixed = self.settings.coverage_factor or 2.0
        if stored is None:
            return np.full(len(self.final), fixed)
        return np.where(np.isnan(stored), fixed, stored)

    def curve(self, row: int) -> pd.DataFrame:
        """The readings of one device row, in the order they were taken."""
        where = self._rows.get(row)
        return self.points.iloc[where if where is not None else []]

    @cached_property
    def _rows(self) -> dict[int, np.ndarray]:
        return self.points.groupby("row", sort=False).indices

    def rows_of(self, device: str) -> pd.DataFrame:
        """Every stored row of a device (several where it was retested)."""
        found = self.devices[self.devices["device"] == device]
        if found.empty:
            raise ReportError(f"no device '{device}' in {self.name} (names as in devices.csv)")
        return found


def load_lot(folders: list[Path]) -> Lot:
    """Read run folders into one Lot, runs in the order they started."""
    if not folders:
        raise ReportError("name at least one run folder")
    entries = [entry for f in folders for entry in _read_folder(Path(f))]
    entries.sort(key=lambda e: str(e[0]["started"] or ""))
    runs = pd.DataFrame([e[0] for e in entries])
    runs["run"] = runs.index
    devices = _devices([e[1].assign(run=k, lot=e[0]["lot"]) for k, e in enumerate(entries)])
    points = _points([e[2].assign(run=k) for k, e in enumerate(entries)], devices)
    settings, notes = _settings(runs)
    notes += _status_notes(runs) + _dry_run_notes(runs)
    return Lot(runs, devices, points, settings, _step_kinds(points), tuple(notes))


def _dry_run_notes(runs: pd.DataFrame) -> list[str]:
    """A run on the simulator is said first thing, so nobody files its yield as production."""
    if "simulator" not in runs:
        return []
    dry = int(runs["simulator"].notna().sum())
    if not dry:
        return []
    which = "every run" if dry == len(runs) else f"{dry} of {len(runs)} runs"
    return [f"DRY RUN: {which} measured the simulated instrument, not real parts"]


Entry = tuple[dict, pd.DataFrame, pd.DataFrame]


def _read_folder(folder: Path) -> list[Entry]:
    """(run, its devices, its points) for every run a folder's results.sqlite holds."""
    path = folder / "results.sqlite"
    if not path.is_file():
        raise StoreError(f"{folder}: not a run folder (no results.sqlite)")
    db = sqlite3.connect(path)
    try:
        runs = pd.read_sql_query("SELECT * FROM run ORDER BY id", db)
        devices = pd.read_sql_query("SELECT * FROM device ORDER BY rowid", db)
        points = pd.read_sql_query("SELECT * FROM point ORDER BY rowid", db)
    except (sqlite3.Error, pd.errors.DatabaseError) as exc:
        raise StoreReadError(f"{path}: cannot be read ({exc})") from None
    finally:
        db.close()
    if runs.empty:
        raise StoreError(f"{path}: holds no run")
    runs = runs.rename(columns={"id": "run_id"})
    out = []
    for run in runs.to_dict("records"):
        run = {c: run.get(c) for c in RUN_TEXT} | run | {"folder": str(folder)}
        out.append((run, _of_run(devices, run["run_id"]), _of_run(points, run["run_id"])))
    return out


def _of_run(table: pd.DataFrame, run_id: object) -> pd.DataFrame:
    return table[table["run_id"] == run_id] if "run_id" in table else table


def _devices(frames: list[pd.DataFrame]) -> pd.DataFrame:
    devices = pd.concat(frames, ignore_index=True)
    for column in ("device", "verdict"):
        if column not in devices:
            raise StoreError(f"the device table has no '{column}' column")
    _fill_missing(devices)
    devices["row"] = devices.index
    key = devices["lot"].astype(str) + "\0" + devices["device"].astype(str)
    devices["final"] = final_mask(devices, key)  # the last row, or the last that stood
    devices["retest"] = key.duplicated(keep="first")
    return devices


def _fill_missing(devices: pd.DataFrame) -> None:
    """Columns an older schema lacks: no figure is NaN, no bin is derived from the verdict."""
    for figure in FIGURES:
        for column in (value_column(figure), u_column(figure)):
            if column not in devices:
                devices[column] = np.nan
            devices[column] = pd.to_numeric(devices[column], errors="coerce").astype(float)
        flag = bound_column(figure)
        devices[flag] = devices[flag].fillna(0).astype(bool) if flag in devices else False
    passed = devices["verdict"] == "pass"
    if "bin_class" not in devices:
        devices["bin_class"] = np.where(passed, "pass", "fail")
    if "soft_bin" not in devices:
        devices["soft_bin"] = devices["verdict"]
    if "hard_bin" not in devices:
        devices["hard_bin"] = np.where(passed, 1, 0)
    devices["hard_bin"] = pd.to_numeric(devices["hard_bin"], errors="coerce").fillna(0).astype(int)
    for column in ("channel", "classification", "reasons"):
        if column not in devices:
            devices[column] = None
    devices["soft_bin"] = devices["soft_bin"].fillna("").astype(str)
    devices["reasons"] = devices["reasons"].fillna("").astype(str)


def _points(frames: list[pd.DataFrame], devices: pd.DataFrame) -> pd.DataFrame:
    points = pd.concat(frames, ignore_index=True)
    for column in POINT_COLUMNS:
        if column not in points:
            points[column] = np.nan
    keys = [c for c in points.columns if c in devices.columns and c not in ("run_id", "row")]
    rows = devices[[*keys, "row"]].drop_duplicates(keys, keep="last")
    points = points.merge(rows, on=keys, how="inner", sort=False)
    for column in ("level_V", "voltage_V", "current_A", "time_s"):
        points[column] = pd.to_numeric(points[column], errors="coerce").astype(float)
    points["in_compliance"] = points["in_compliance"].fillna(0).astype(bool)
    return points


def _step_kinds(points: pd.DataFrame) -> dict[str, str]:
    """A sweep always programs at least two levels, a spot one (as the re-judge reads it)."""
    levels = points.groupby("step", sort=False)["level_V"].nunique()
    return {str(step): "sweep" if n > 1 else "spot" for step, n in levels.items()}


def _settings(runs: pd.DataFrame) -> tuple[JudgeSettings, list[str]]:
    """The judge section of the first run's stored recipe; a note where later runs differ."""
    parsed = [_judge_of(run) for run in runs.itertuples()]
    first = parsed[0][0]
    notes = [why for _, why in parsed if why]
    for k, (other, why) in enumerate(parsed[1:], start=1):
        if not why and (other.limits != first.limits or other.bins != first.bins):
            notes.append(
                f"{runs['folder'][k]}: judged under other limits or bins than the first run; "
                "the report shows the first run's"
            )
    return first, notes


def _judge_of(run) -> tuple[JudgeSettings, str]:
    text = run.recipe_text or ""
    where = f"{run.folder}/results.sqlite (recipe stored with the run)"
    if not text.strip():
        return JudgeSettings(), f"{run.folder}: no recipe stored with the run; limits unknown"
    try:
        # Start-up speed: the recipe format builds pydantic models at import; only this reads it.
        from sequencer.recipe.recipebuild import parse_judge

        source = parse_yaml(text, where)
        data = source.data if isinstance(source.data, dict) else {}
        return parse_judge(source, data.get("judge", {})), ""
    except RecipeError as exc:
        return JudgeSettings(), f"stored recipe unreadable, limits unknown: {exc}"


def _status_notes(runs: pd.DataFrame) -> list[str]:
    return [
        f"{run.folder}: run {run.status}; the devices stored so far are shown"
        for run in runs.itertuples()
        if run.status not in ("completed", None)
    ]
