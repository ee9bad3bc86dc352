"""Schema versions: a new file gets every step, an old one the steps it lacks, data kept."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from sequencer.model.errors import StoreError
from sequencer.store import migrations
from sequencer.store.database import open_database
from sequencer.store.export import load_run

V1_DUMP = Path(__file__).parent / "data" / "run-v1.sql"


def _v1_database(path: Path) -> Path:
    """A results.sqlite exactly as the first release left it (its own dump, see the file)."""
    db = sqlite3.connect(path)
    db.executescript(V1_DUMP.read_text())
    db.execute("PRAGMA user_version = 1")
    db.commit()
    db.close()
    return path


def _columns(db: sqlite3.Connection, table: str) -> list[str]:
    return [row[1] for row in db.execute(f"PRAGMA table_info({table})")]


def test_a_new_database_is_at_the_latest_version_with_every_table(tmp_path):
    db = open_database(tmp_path / "results.sqlite")
    assert migrations.version(db) == migrations.LATEST == len(migrations.MIGRATIONS)
    tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert tables == {"run", "session", "device", "point"}
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    key = [r[1] for r in sorted(db.execute("PRAGMA table_info(device)"), key=lambda r: r[5])
           if r[5]]  # fmt: skip
    assert key == ["run_id", "round", "device"]
    db.close()


def test_a_version_1_database_migrates_and_keeps_every_device_and_point(tmp_path):
    path = _v1_database(tmp_path / "results.sqlite")
    old = sqlite3.connect(path)
    devices_before = old.execute(
        "SELECT device, verdict, dynamic_impedance_ohm FROM device ORDER BY device"
    ).fetchall()
    points_before = old.execute("SELECT device, idx, current_A FROM point ORDER BY 1, 2").fetchall()
    old.close()
    assert len(devices_before) == 2 and len(points_before) == 82

    db = open_database(path)
    assert migrations.version(db) == migrations.LATEST
    after = db.execute(
        "SELECT device, verdict, dynamic_impedance_ohm, round, session, seq FROM device "
        "ORDER BY device"
    ).fetchall()
    assert [row[:3] for row in after] == devices_before
    assert [row[3:] for row in after] == [(1, 1, 1), (1, 1, 2)]
    points = db.execute("SELECT device, idx, current_A, round FROM point ORDER BY 1, 2").fetchall()
    assert [p[:3] for p in points] == points_before and {p[3] for p in points} == {1}
    session = db.execute("SELECT session, status, identity, host FROM session").fetchall()
    assert session == [(1, "completed", "CCBENCH,SIMULATED-SMU,SIM000003,0.1.0", "bench-b2")]
    for column in ("hard_bin", "peak_dissipation_W", "measured", "round_started"):
        assert column in _columns(db, "device")
    assert "round" in _columns(db, "point") and "uid" in _columns(db, "run")
    db.close()


def test_a_migrated_version_1_folder_reads_like_a_new_one(tmp_path):
    folder = tmp_path / "run"
    folder.mkdir()
    _v1_database(folder / "results.sqlite")
    before = load_run(folder)  # read as it is, without migrating
    assert list(before["round"]) == [1, 1] and list(before["lot"]) == ["FK2611-03"] * 2
    open_database(folder / "results.sqlite").close()
    after = load_run(folder)
    assert list(after["device"]) == list(before["device"])
    assert list(after["verdict"]) == ["fail", "pass"]


def test_the_judge_schema_2_migrates_to_the_latest(tmp_path):
    path = _v1_database(tmp_path / "results.sqlite")
    db = sqlite3.connect(path, isolation_level=None)
    migrations._v2(db)
    db.execute("PRAGMA user_version = 2")
    db.execute("UPDATE device SET hard_bin = 1, bin_class = 'good' WHERE verdict = 'pass'")
    db.close()
    db = open_database(path)
    rows = db.execute("SELECT device, hard_bin, bin_class, round FROM device ORDER BY 1").fetchall()
    assert rows == [("FK2611-03-001", None, None, 1), ("FK2611-03-002", 1, "good", 1)]
    db.close()


@pytest.mark.robustness
def test_a_step_that_fails_leaves_the_file_at_the_version_before(tmp_path, monkeypatch):
    path = _v1_database(tmp_path / "results.sqlite")

    def broken(db):
        db.execute("ALTER TABLE run ADD COLUMN half_done TEXT")
        raise sqlite3.OperationalError("disk I/O error")

    monkeypatch.setattr(migrations, "MIGRATIONS", (migrations._v1, broken))
    monkeypatch.setattr(migrations, "LATEST", 2)
    with pytest.raises(StoreError, match="cannot be opened"):
        open_database(path)
    db = sqlite3.connect(path)
    assert migrations.version(db) == 1 and "half_done" not in _columns(db, "run")
    db.close()


@pytest.mark.robustness
def test_a_file_from_a_newer_ccbench_is_refused(tmp_path):
    path = tmp_path / "results.sqlite"
    db = sqlite3.connect(path)
    db.execute(f"PRAGMA user_version = {migrations.LATEST + 1}")
    db.close()
    with pytest.raises(StoreError, match="newer than this ccbench knows"):
        open_database(path)
