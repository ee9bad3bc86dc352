"""The repetition number is `round` (schema 8); folders written before call it `pass`.

A folder of schema 7 is made here the way ccbench wrote one then: a run of today, taken back by
the inverse of the schema 8 step (columns renamed back, user_version 7, journal keys, CSV header
and manifest schedule under their old names, the manifest's record of the journal's size kept
true). Every command that reads it must show today's names; one that writes migrates it.
"""

from __future__ import annotations

import csv
import io
import json
import sqlite3
from pathlib import Path

import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.store.migrations import LATEST, MIGRATIONS, RENAMED, migrate
from tests.store.conftest import write_recipe


def ccbench(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), console=Console(file=out, width=300, highlight=False))
    return code, out.getvalue()


def columns(db: sqlite3.Connection, table: str) -> list[str]:
    return [row[1] for row in db.execute(f"PRAGMA table_info({table})")]


def back_to_schema_7(folder: Path) -> None:
    db = sqlite3.connect(folder / "results.sqlite")
    for table, old, new in RENAMED:
        if new in columns(db, table):
            db.execute(f'ALTER TABLE {table} RENAME COLUMN "{new}" TO "{old}"')
    db.execute("PRAGMA user_version = 7")
    db.commit()
    db.close()
    journal = folder / "journal.jsonl"
    lines = []
    for line in journal.read_text(encoding="utf-8").splitlines():
        entry = json.loads(line)
        entry = {{"round": "pass", "round_started": "pass_started"}.get(k, k): v
                 for k, v in entry.items()}  # fmt: skip
        lines.append(json.dumps(entry, separators=(",", ":")))
    journal.write_text("\n".join(lines) + "\n", encoding="utf-8")
    table = (folder / "devices.csv").read_text(encoding="utf-8").split("\n", 1)
    head = table[0].replace(",round,", ",pass,")
    (folder / "devices.csv").write_text(head + "\n" + table[1], encoding="utf-8")
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    if isinstance(manifest.get("repeat"), dict):
        manifest["repeat"]["passes"] = manifest["repeat"].pop("rounds")
    if "records" in manifest:
        manifest["records"]["journal_bytes"] = journal.stat().st_size
        del manifest["records"]["journal_sha256"]  # schema 7 recorded the size alone
    (folder / "manifest.json").write_text(json.dumps(manifest, indent=2), encoding="utf-8")


@pytest.fixture
def old_folder(tmp_path: Path) -> tuple[Path, Path]:
    recipe = write_recipe(tmp_path / "recipes", channels=2, points=21)
    out = tmp_path / "run"
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--rounds", "2")
    assert code == 0, text
    back_to_schema_7(out)
    return recipe, out


def test_the_schema_8_step_renames_every_column_and_keeps_keys_and_values(tmp_path):
    db = sqlite3.connect(tmp_path / "r.sqlite", isolation_level=None)
    for step in MIGRATIONS[:7]:  # a file of schema 7, filled as ccbench then filled it
        step(db)
    db.execute("PRAGMA user_version = 7")
    db.execute("INSERT INTO run (id, started, status) VALUES (1, 'now', 'completed')")
    db.execute(
        "INSERT INTO device (run_id, pass, device, verdict, seq) VALUES (1, 2, 'D1', 'pass', 1)"
    )
    db.execute(
        "INSERT INTO point (run_id, pass, device, idx, current_A) VALUES (1, 2, 'D1', 0, 1e-3)"
    )
    assert migrate(db, "r.sqlite") == (7, LATEST)
    assert "pass" not in columns(db, "device") and "round" in columns(db, "device")
    assert "round_started" in columns(db, "device") and "round" in columns(db, "point")
    key = [
        r[1] for r in sorted(db.execute("PRAGMA table_info(device)"), key=lambda r: r[5]) if r[5]
    ]
    assert key == ["run_id", "round", "device"]
    assert db.execute("SELECT round, verdict FROM device").fetchall() == [(2, "pass")]
    joined = "SELECT COUNT(*) FROM point JOIN device USING (run_id, round, device)"
    assert db.execute(joined).fetchone()[0] == 1
    with pytest.raises(sqlite3.IntegrityError):  # the key still holds: one row per round
        db.execute("INSERT INTO device (run_id, round, device, verdict) VALUES (1, 2, 'D1', 'x')")


@pytest.mark.sim
def test_a_schema_7_folder_is_read_under_todays_names_without_being_changed(old_folder):
    _, out = old_folder
    before = (out / "results.sqlite").read_bytes()
    code, text = ccbench("results", str(out), "--devices", "--json")
    assert code == 0, text
    devices = json.loads(text)["devices"]
    assert sorted(d["round"] for d in devices) == [1, 1, 2, 2]
    code, text = ccbench("report", str(out), "--text")
    assert code == 0, text
    code, text = ccbench("status", str(out))
    assert code == 0, text
    assert (out / "results.sqlite").read_bytes() == before  # reading never migrates


@pytest.mark.sim
def test_a_schema_7_folder_is_re_judged_and_resumed_and_then_speaks_round(old_folder):
    recipe, out = old_folder
    code, text = ccbench("rejudge", str(out), "--recipe", str(recipe))
    assert code == 0, text
    rejudged = next(out.glob("rejudged-*.csv"))
    with open(rejudged, newline="") as f:
        assert sorted(r["round"] for r in csv.DictReader(f)) == ["1", "1", "2", "2"]
    code, text = ccbench(
        "run", str(recipe), "--sim", "--out", str(out), "--resume", "--rounds", "3"
    )
    assert code == 0, text
    assert "round 3 done: 2 devices" in text
    db = sqlite3.connect(out / "results.sqlite")
    assert db.execute("PRAGMA user_version").fetchone()[0] == LATEST
    assert "pass" not in columns(db, "device") and "pass" not in columns(db, "rejudge_device")
    rounds = db.execute("SELECT round, COUNT(*) FROM device GROUP BY round").fetchall()
    assert rounds == [(1, 2), (2, 2), (3, 2)]
    with open(out / "devices.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["round"] for r in rows] == ["1", "1", "2", "2", "3", "3"]
    code, text = ccbench("results", str(out), "--devices", "--json")
    assert code == 0, text  # the journal, half `pass` and half `round`, still agrees


def test_a_recipe_that_still_says_passes_is_told_the_new_word(tmp_path):
    recipe = write_recipe(
        tmp_path, channels=2, points=21, extra="repeat: {every: 0 s, passes: 2}\n"
    )
    code, text = ccbench("check", str(recipe))
    assert code == 2
    assert "repeat.passes is now called 'rounds'; write 'rounds:' instead" in text
    assert len([line for line in text.splitlines() if "passes" in line]) == 1
