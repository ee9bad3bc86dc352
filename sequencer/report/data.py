"""One or more run folders as pandas tables, for the lot reports. The only module of the
reports that reads a run folder.

Tables are read by column name (`SELECT *`), so columns the store adds later are carried along
and columns an older schema lacks are filled in. A device measured more than once (a retest in
a later run folder of the same lot, or a later round in one folder) keeps every row in
`devices`; the last one is its result (`final`). Points are matched to their device row by every
column the point and device tables share (today run, round and device; `round` is read
under its name before schema 8, `pass`, from a folder that could not be migrated).

Points are not loaded with the lot: a lot of 100,000 devices holds some 9 million of them, and
the summaries need none. A device's readings are read from its run's SQLite when a picture or
the STDF file asks for them (`curve`, `curves`), by the point table's own key.

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
from sequencer.store.crosscheck import check_folder
from sequencer.store.frames import read_frame
from sequencer.store.oldnames import OLD_NAMES, current_frame
from sequencer.store.readonly import open_for_reading
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
class PointSource:
    """Where the points of one run are: its results.sqlite, its run id, and the columns that
    tie a point to its device besides the run (`round`, `device`), as the file names them
    (`frame_key` gives a key's name in the device table, which has today's names)."""

    path: Path
    run_id: object
    keys: tuple[str, ...]
    columns: tuple[str, ...]  # the point table's

    def read(self, sql: str, params: tuple = ()) -> tuple[list[str], list[tuple]]:
        try:
            db = open_for_reading(self.path)
        except sqlite3.Error as exc:
            raise StoreReadError(f"{self.path}: cannot be read ({exc})") from None
        try:
            cursor = db.execute(sql, params)
            return [d[0] for d in cursor.description], cursor.fetchall()
        except sqlite3.Error as exc:
            raise StoreReadError(f"{self.path}: cannot be read ({exc})") from None
        finally:
            db.close()

    @staticmethod
    def frame_key(key: str) -> str:
        return OLD_NAMES.get(key, key)

    def run_filter(self) -> tuple[str, tuple]:
        return ("run_id = ?", (self.run_id,)) if self.run_id is not None else ("1", ())


@dataclass(frozen=True, eq=False)
class Lot:
    """What the reports work from. `runs`: one row per run (column `run` is its index);
    `devices`: every stored device row in test order, with `run`, `row` and `final`; the
    points of a device row through `curve` (all of them, once, through `points`)."""

    runs: pd.DataFrame
    devices: pd.DataFrame
    settings: JudgeSettings
    notes: tuple[str, ...]
    sources: tuple[PointSource, ...] = ()  # one per run, in the order of `runs`

    @cached_property
    def _final_names(self) -> np.ndarray:
        return self.final["device"].to_numpy(str)  # once: text columns convert slowly

    @cached_property
    def final(self) -> pd.DataFrame:
        """The result row of each device (filtered once: the summaries ask for it per figure)."""
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
            self._final_names,
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
        """The readings of one device row, in the order they were taken (none for a row whose
        points belong to a later row of the same key, as the store keeps one set per key)."""
        row = int(row)
        if row not in self._owners:
            return _typed(pd.DataFrame(columns=[*POINT_COLUMNS, "row"]))
        device = self.devices.iloc[row]
        source = self.sources[int(device["run"])]
        where, params = source.run_filter()
        for key in source.keys:
            where += f' AND "{key}" = ?'
            params += (_plain(device[source.frame_key(key)]),)
        names, rows = source.read(f"SELECT * FROM point WHERE {where} ORDER BY rowid", params)
        points = current_frame(pd.DataFrame.from_records(rows, columns=names))
        points = points.assign(run=int(device["run"]), row=row)
        return _typed(_with_point_columns(points))

    def curves(self, rows) -> pd.DataFrame:
        """The readings of several device rows, row after row."""
        frames = [self.curve(row) for row in rows]
        if not frames:
            return self.curve(-1)
        return pd.concat(frames, ignore_index=True)

    @cached_property
    def points(self) -> pd.DataFrame:
        """Every reading with the `row` of its device: the whole lot at once, for a caller
        that really needs it (the reports read by device)."""
        return self.curves(self.devices["row"])

    @cached_property
    def step_kinds(self) -> dict[str, str]:
        """A sweep always programs at least two levels, a spot one (as the re-judge reads it):
        the distinct levels of each step counted in SQL."""
        levels: dict[str, set[float]] = {}
        for source in self.sources:
            for step, level in _step_levels(source):
                if step is None:
                    continue
                found = levels.setdefault(str(step), set())
                if level is not None and level == level:
                    found.add(float(level))
        return {step: "sweep" if len(found) > 1 else "spot" for step, found in levels.items()}

    def last_reading_s(self, row: int) -> float:
        """When the last reading of a device row was taken (its `time_s`; NaN for none), from
        one grouped query per run rather than a read of every curve."""
        return self._last_readings.get(int(row), float("nan"))

    @cached_property
    def _last_readings(self) -> dict[int, float]:
        out: dict[int, float] = {}
        owners = self.devices[self.devices["row"].isin(self._owners)]
        for run, source in enumerate(self.sources):
            if "time_s" not in source.columns:
                continue
            where, params = source.run_filter()
            keys = ", ".join(f'"{k}"' for k in source.keys) or "1"
            sql = (
                f"SELECT {keys}, MAX(time_s) FROM point WHERE {where} "
                f"AND abs(time_s) < 1e308 GROUP BY {keys}"
            )  # abs(...) < 1e308: finite readings only, as a curve's own maximum takes them
            last = {tuple(found[:-1]): found[-1] for found in source.read(sql, params)[1]}
            mine = owners[owners["run"] == run]
            columns = [mine[source.frame_key(k)].map(_plain) for k in source.keys]
            columns = columns or [pd.Series(1, mine.index)]
            for row, *key in zip(mine["row"], *columns, strict=True):
                if last.get(tuple(key)) is not None:
                    out[int(row)] = float(last[tuple(key)])
        return out

    @cached_property
    def _owners(self) -> set[int]:
        """The device rows that own points: the last row of each key (run and the shared
        columns), as the points were matched when the whole table was read."""
        shared = {source.frame_key(k) for source in self.sources for k in source.keys}
        keys = ["run", *sorted(shared)]
        keys = [k for k in keys if k in self.devices]
        rows = self.devices.drop_duplicates(keys, keep="last")["row"]
        return {int(r) for r in rows}

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
    settings, notes = _settings(runs)
    notes += _status_notes(runs) + _dry_run_notes(runs)
    return Lot(runs, devices, settings, tuple(notes), tuple(e[2] for e in entries))


def _dry_run_notes(runs: pd.DataFrame) -> list[str]:
    """A run on the simulator is said first thing, so nobody files its yield as production."""
    if "simulator" not in runs:
        return []
    dry = int(runs["simulator"].notna().sum())
    if not dry:
        return []
    which = "every run" if dry == len(runs) else f"{dry} of {len(runs)} runs"
    return [f"DRY RUN: {which} measured the simulated instrument, not real parts"]


Entry = tuple[dict, pd.DataFrame, PointSource]


def _read_folder(folder: Path) -> list[Entry]:
    """(run, its devices, where its points are) for every run a folder's results.sqlite
    holds."""
    path = folder / "results.sqlite"
    if not path.is_file():
        raise StoreError(f"{folder}: not a run folder (no results.sqlite)")
    try:
        db = open_for_reading(path)
    except sqlite3.Error as exc:
        raise StoreReadError(f"{path}: cannot be read ({exc})") from None
    try:
        check_folder(folder, db)
        runs = pd.read_sql_query("SELECT * FROM run ORDER BY id", db)
        devices = current_frame(read_frame(db, "SELECT * FROM device ORDER BY rowid"))
        point_columns = [r[1] for r in db.execute("PRAGMA table_info(point)")]
    except (sqlite3.Error, pd.errors.DatabaseError) as exc:
        raise StoreReadError(f"{path}: cannot be read ({exc})") from None
    finally:
        db.close()
    if runs.empty:
        raise StoreError(f"{path}: holds no run")
    runs = runs.rename(columns={"id": "run_id"})
    keys = tuple(
        c
        for c in point_columns
        if OLD_NAMES.get(c, c) in devices.columns and c not in ("run_id", "row")
    )
    by_run = "run_id" in point_columns and "run_id" in devices.columns
    out = []
    for run in runs.to_dict("records"):
        run = {c: run.get(c) for c in RUN_TEXT} | run | {"folder": str(folder)}
        source = PointSource(path, run["run_id"] if by_run else None, keys, tuple(point_columns))
        out.append((run, _of_run(devices, run["run_id"]), source))
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


def _with_point_columns(points: pd.DataFrame) -> pd.DataFrame:
    for column in POINT_COLUMNS:
        if column not in points:
            points[column] = np.nan
    return points


def _typed(points: pd.DataFrame) -> pd.DataFrame:
    for column in ("level_V", "voltage_V", "current_A", "time_s"):
        points[column] = pd.to_numeric(points[column], errors="coerce").astype(float)
    points["in_compliance"] = points["in_compliance"].fillna(0).astype(bool)
    points["row"] = points["row"].astype(int)
    return points


def _plain(value: object) -> object:
    """A key value as SQLite takes it (numpy integers are not bound as numbers)."""
    return value.item() if isinstance(value, np.generic) else value


def _step_levels(source: PointSource) -> list[tuple]:
    """Each step and level programmed in a run. Every point has its device row: the store
    writes a device and its points in one transaction (store/database.py write_device)."""
    if "step" not in source.columns:
        return []
    level = "level_V" if "level_V" in source.columns else "NULL"
    where, params = source.run_filter()
    return source.read(f"SELECT DISTINCT step, {level} FROM point WHERE {where}", params)[1]


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
