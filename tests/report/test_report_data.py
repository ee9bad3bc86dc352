"""The loader: run folders in, tables out; tolerant of columns the store adds or lacks."""

from __future__ import annotations

import csv
import io
import json
import shutil
import sqlite3

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from sequencer.model.errors import StoreError
from sequencer.report.data import ReportError, load_lot, value_column
from sequencer.store.frames import read_frame

DRY = "DRY RUN: every run measured the simulated instrument, not real parts"


def _csv(folder):
    with open(folder / "devices.csv", newline="") as f:
        return list(csv.DictReader(f))


def test_devices_and_points_match_the_store(lot_folder):
    lot = load_lot([lot_folder])
    stored = _csv(lot_folder)
    assert lot.devices["device"].tolist() == [r["device"] for r in stored]
    assert lot.devices["verdict"].tolist() == [r["verdict"] for r in stored]
    ip = lot.devices[value_column("regulated_current")].to_numpy()
    want = np.array([float(r["regulated_current_A"] or "nan") for r in stored])
    np.testing.assert_array_equal(ip, want)
    db = sqlite3.connect(lot_folder / "results.sqlite")
    assert len(lot.points) == db.execute("SELECT COUNT(*) FROM point").fetchone()[0]
    assert lot.step_kinds == {"iv": "sweep", "at-test-voltage": "spot"}
    assert lot.name == "FK2611-07" and lot.notes == (
        DRY,
    )  # the demo folders stand for simulator runs


def test_limits_come_from_the_stored_recipe(lot_folder, tmp_path):
    lot = load_lot([lot_folder])
    ip = lot.limit("regulated_current")
    assert (ip.min, ip.max) == (pytest.approx(1.62e-3), pytest.approx(1.98e-3))
    assert lot.settings.decision == "guarded"
    u = lot.final["regulated_current_u_A"].to_numpy()
    big_u = lot.expanded("regulated_current")
    known = np.isfinite(u)
    np.testing.assert_allclose(big_u[known], 2 * u[known])
    assert np.isinf(big_u[~known]).all()  # as the judge takes an unknown u


def test_a_retest_in_a_later_folder_supersedes(lot_folder, retest_folder):
    lot = load_lot([retest_folder, lot_folder])  # order given does not matter: by start time
    assert lot.runs["folder"].tolist() == [str(lot_folder), str(retest_folder)]
    again = lot.devices[lot.devices["retest"]]
    assert again["device"].tolist() == ["FK2611-07-004", "FK2611-07-008"]
    assert (again["run"] == 1).all() and again["final"].all()
    assert len(lot.final) == len(_csv(lot_folder))
    first = lot.devices[(lot.devices["device"] == "FK2611-07-004") & (lot.devices["run"] == 0)]
    assert not first["final"].any()
    assert len(lot.rows_of("FK2611-07-004")) == 2


def test_added_columns_are_carried_and_a_pass_key_matches_points(lot_folder, tmp_path):
    """A later schema: an extra device column, and a pass number in device and point."""
    folder = tmp_path / "newer"
    shutil.copytree(lot_folder, folder)
    db = sqlite3.connect(folder / "results.sqlite")
    with db:
        db.execute("ALTER TABLE device ADD COLUMN temperature_C REAL DEFAULT 25")
        db.execute("ALTER TABLE device ADD COLUMN round_no INTEGER DEFAULT 1")
        db.execute("ALTER TABLE point ADD COLUMN round_no INTEGER DEFAULT 1")
        db.execute("ALTER TABLE run ADD COLUMN site TEXT DEFAULT 'B2'")
        db.execute("PRAGMA user_version = 9")
    db.close()
    lot = load_lot([folder])
    assert (lot.devices["temperature_C"] == 25).all()
    assert lot.runs["site"].tolist() == ["B2"]
    assert len(lot.points) == len(load_lot([lot_folder]).points)


def test_missing_columns_are_filled(lot_folder, tmp_path):
    """An older schema without bins and without the peak figures."""
    folder = tmp_path / "older"
    shutil.copytree(lot_folder, folder)
    manifest = json.loads((folder / "manifest.json").read_text())
    manifest.pop("records")  # an older ccbench recorded no end-of-run check values
    (folder / "manifest.json").write_text(json.dumps(manifest))
    db = sqlite3.connect(folder / "results.sqlite")
    with db:
        for column in ("hard_bin", "bin_class", "soft_bin", "peak_current_A", "peak_current_u_A"):
            db.execute(f"ALTER TABLE device DROP COLUMN {column}")
    db.close()
    lot = load_lot([folder])
    passed = lot.devices["verdict"] == "pass"
    assert (lot.devices.loc[passed, "bin_class"] == "pass").all()
    assert (lot.devices.loc[passed, "hard_bin"] == 1).all()
    assert lot.devices[value_column("peak_current")].isna().all()


@pytest.mark.robustness
def test_unreadable_inputs_say_what_is_wrong(tmp_path, lot_folder):
    with pytest.raises(StoreError, match="not a run folder"):
        load_lot([tmp_path])
    with pytest.raises(ReportError, match="at least one"):
        load_lot([])
    lot = load_lot([lot_folder])
    with pytest.raises(ReportError, match="no device 'nope'"):
        lot.rows_of("nope")
    broken = tmp_path / "broken"
    broken.mkdir()
    (broken / "results.sqlite").write_bytes(b"not a database at all" * 100)
    with pytest.raises(StoreError, match="cannot be read"):
        load_lot([broken])


@pytest.mark.robustness
def test_a_recipe_text_that_no_longer_parses_is_a_note(lot_folder, tmp_path):
    folder = tmp_path / "odd"
    shutil.copytree(lot_folder, folder)
    db = sqlite3.connect(folder / "results.sqlite")
    with db:
        db.execute("UPDATE run SET recipe_text = 'judge: {limits: {regulated_current: 3}}'")
    db.close()
    lot = load_lot([folder])
    assert lot.settings.limits == ()
    assert any("limits unknown" in note for note in lot.notes)


def test_notes_for_other_limits_and_an_unfinished_run(lot_folder, retest_folder, tmp_path):
    folder = tmp_path / "changed"
    shutil.copytree(retest_folder, folder)
    db = sqlite3.connect(folder / "results.sqlite")
    with db:
        text = db.execute("SELECT recipe_text FROM run").fetchone()[0]
        db.execute(
            "UPDATE run SET recipe_text = ?, status = 'running'",
            (text.replace("max: 3.5 V", "max: 3.0 V"),),
        )
    db.close()
    notes = load_lot([lot_folder, folder]).notes
    assert any("other limits" in n for n in notes)
    assert any("run running" in n for n in notes)


def test_the_summaries_read_no_point(lot_folder, tmp_path):
    """The text report and the summary after a run read the device table alone: with the
    point table gone they are the same (the points are read only for pictures and STDF)."""
    from sequencer.cli.lotview import print_after_run

    folder = tmp_path / "no-points"
    shutil.copytree(lot_folder, folder)
    db = sqlite3.connect(folder / "results.sqlite")
    with db:
        db.execute("DROP TABLE point")
    db.close()

    def shown(where):
        console = Console(file=io.StringIO(), width=100, color_system=None)
        print_after_run(console, load_lot([where]))
        return console.file.getvalue()

    assert shown(folder) == shown(lot_folder)


def test_a_curve_is_read_by_device_as_the_whole_table_matched_it(lot_folder, retest_folder):
    lot = load_lot([lot_folder, retest_folder])
    db = sqlite3.connect(lot_folder / "results.sqlite")
    stored = db.execute("SELECT current_A FROM point WHERE device = 'FK2611-07-002' ORDER BY rowid")
    (row,) = lot.rows_of("FK2611-07-002")["row"]
    assert lot.curve(row)["current_A"].tolist() == [r[0] for r in stored]
    retested = lot.rows_of("FK2611-07-004")["row"].tolist()
    assert all(len(lot.curve(r)) for r in retested)  # each run's row has its own points
    assert len(lot.curves(retested)) == sum(len(lot.curve(r)) for r in retested)


def test_devices_read_in_chunks_are_the_table_read_at_once(lot_folder):
    db = sqlite3.connect(lot_folder / "results.sqlite")
    sql = "SELECT * FROM device ORDER BY rowid"
    whole = pd.read_sql_query(sql, db)
    for size in (1, 3, 5, 7):  # some chunks hold only NULLs in a figure column
        pd.testing.assert_frame_equal(read_frame(db, sql, size), whole)
