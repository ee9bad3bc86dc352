"""The shared PostgreSQL store: the run folder's schema, concurrent migration, idempotent upload,
and a shipper that outlasts an unreachable database."""

from __future__ import annotations

import json
import sqlite3
import threading
from pathlib import Path

import pytest

from tests.support.postgres import needs_psycopg

psycopg = needs_psycopg()

from sequencer.recipe.resultsdb import SharedDatabase  # noqa: E402
from sequencer.store import migrations  # noqa: E402 - needs psycopg
from sequencer.store.database import open_database  # noqa: E402
from sequencer.store.runstore import RunStore  # noqa: E402
from sequencer.store.shared import pgstore  # noqa: E402 - needs psycopg
from sequencer.store.shared.shipper import Shipper  # noqa: E402
from tests.store.conftest import load, manifest_of, measure_into, write_recipe  # noqa: E402
from tests.support.pgserver import free_port  # noqa: E402

TYPES = {"REAL": "double precision", "INTEGER": ("integer", "bigint"), "TEXT": "text"}


def sqlite_columns(table: str, db: sqlite3.Connection) -> dict[str, str]:
    return {row[1]: row[2] for row in db.execute(f"PRAGMA table_info({table})")}


def pg_columns(table: str, conn: psycopg.Connection) -> dict[str, str]:
    rows = conn.execute(
        "SELECT column_name, data_type FROM information_schema.columns WHERE table_name = %s",
        (table,),
    ).fetchall()
    return dict(rows)


def make_run(tmp_path: Path, lot: str = "FK2611-07", channels: int = 4) -> Path:
    recipe = load(write_recipe(tmp_path / f"recipes-{lot}", lot=lot, channels=channels))
    folder = tmp_path / f"run-{lot}"
    store = RunStore.create(folder, manifest_of(recipe) | {"station": "FLC-bench-T1"})
    measure_into(store, recipe)
    store.finish("completed", "2026-05-04T23:00:00.000+00:00")
    return folder


def counts(url: str) -> tuple[int, int, int, int]:
    with psycopg.connect(url) as conn:
        row = conn.execute(
            "SELECT (SELECT COUNT(*) FROM run), (SELECT COUNT(*) FROM session), "
            "(SELECT COUNT(*) FROM device), (SELECT COUNT(*) FROM point)"
        ).fetchone()
    assert row is not None
    return tuple(int(v) for v in row)  # type: ignore[return-value]


def test_the_shared_schema_has_the_tables_and_columns_of_the_run_folder(tmp_path, pg_url):
    lite = open_database(tmp_path / "results.sqlite")
    with pgstore.connect(pg_url) as conn:
        assert pgstore.migrate(conn) == (0, pgstore.LATEST)
        assert pgstore.LATEST == migrations.LATEST
        assert pgstore.migrate(conn) == (pgstore.LATEST, pgstore.LATEST)  # nothing left to do
        for table in ("run", "session", "device", "point"):
            mine, theirs = sqlite_columns(table, lite), pg_columns(table, conn)
            assert list(mine) == pgstore.columns(conn, table)  # same names, same order
            for name, kind in mine.items():
                wanted = TYPES[kind]
                assert theirs[name] in (wanted if isinstance(wanted, tuple) else (wanted,)), name
    lite.close()


def test_stations_starting_together_migrate_once(pg_url):
    errors: list[BaseException] = []

    def start() -> None:
        try:
            with pgstore.connect(pg_url) as conn:
                pgstore.migrate(conn)
        except BaseException as exc:
            errors.append(exc)

    threads = [threading.Thread(target=start) for _ in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert errors == []
    with pgstore.connect(pg_url) as conn:
        assert pgstore.version(conn) == pgstore.LATEST
        assert conn.execute("SELECT COUNT(*) FROM ccbench_schema").fetchone() == (1,)


def test_uploading_a_folder_twice_stores_every_result_once(tmp_path, pg_url):
    folder = make_run(tmp_path)
    database = SharedDatabase(pg_url)
    first = Shipper(folder, database)
    assert first.finish(wait_s=0).endswith(
        "every result of the run is stored (4 sent by this session)"
    )
    stored = counts(pg_url)
    assert stored[:3] == (1, 1, 4)
    again = Shipper(folder, database)  # a new process: it starts from the database's last seq
    again.finish(wait_s=0)
    assert again.sent == 0 and counts(pg_url) == stored
    replay = Shipper(folder, database, offset=0)
    replay._skip_to = lambda seq: 0  # type: ignore[method-assign]  # resend every line
    replay.finish(wait_s=0)
    assert replay.sent == 0 and counts(pg_url) == stored  # the same lines change nothing
    lite = sqlite3.connect(folder / "results.sqlite")
    local = lite.execute("SELECT device, verdict, hard_bin FROM device ORDER BY device").fetchall()
    points = lite.execute("SELECT COUNT(*), SUM(current_A) FROM point").fetchone()
    lite.close()
    with psycopg.connect(pg_url) as conn:
        shared = conn.execute("SELECT device, verdict, hard_bin FROM device ORDER BY 1").fetchall()
        shared_points = conn.execute('SELECT COUNT(*), SUM("current_A") FROM point').fetchone()
        status = conn.execute("SELECT status, finished FROM run").fetchone()
    assert shared == local and shared_points[0] == points[0]
    assert shared_points[1] == pytest.approx(points[1], rel=1e-12)
    assert status == ("completed", "2026-05-04T23:00:00.000+00:00")


def test_a_later_entry_for_the_same_device_replaces_it_with_its_points(tmp_path, pg_url):
    folder = make_run(tmp_path, channels=2)
    Shipper(folder, SharedDatabase(pg_url)).finish(wait_s=0)
    journal = folder / "journal.jsonl"
    lines = journal.read_text().splitlines()
    entry = json.loads(lines[0])
    entry.update(seq=len(lines) + 1, verdict="fail", hard_bin=5)
    entry["points"] = {k: v[:3] for k, v in entry["points"].items()}
    with open(journal, "a") as f:
        f.write(json.dumps(entry) + "\n")
    Shipper(folder, SharedDatabase(pg_url)).finish(wait_s=0)
    with psycopg.connect(pg_url) as conn:
        row = conn.execute(
            "SELECT verdict, hard_bin, seq FROM device WHERE device = %s", (entry["device"],)
        ).fetchone()
        points = conn.execute(
            "SELECT COUNT(*) FROM point WHERE device = %s", (entry["device"],)
        ).fetchone()
    assert row == ("fail", 5, len(lines) + 1) and points == (3,)


def test_an_unreachable_database_leaves_the_results_waiting_in_the_journal(tmp_path, pg_url):
    folder = make_run(tmp_path, channels=3)
    nowhere = SharedDatabase(f"postgresql://ccbench@127.0.0.1:{free_port()}/ccbench")
    clock = iter(float(t) for t in range(100))
    shipper = Shipper(folder, nowhere, sleep=lambda s: None, clock=lambda: next(clock))
    line = shipper.finish(wait_s=5)
    assert "not reached (connection failed" in line and "3 results wait in" in line
    assert f"`ccbench upload {folder}` sends them" in line
    later = Shipper(folder, SharedDatabase(pg_url))
    assert later.finish(wait_s=0).endswith("(3 sent by this session)")
    assert counts(pg_url)[2] == 3
