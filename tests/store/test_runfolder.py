"""The run folder: one run at a time (lock), a held run refused without --resume, a changed
recipe refused unless accepted, the manifest and sessions that make results traceable."""

from __future__ import annotations

import json
import os
import pickle
import platform
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from sequencer.model.errors import CcbenchError, StoreError
from sequencer.store.runfolder import FolderLock, FolderRefused, read_manifest
from sequencer.store.runstore import RunStore
from tests.store.conftest import load, manifest_of, measure_into

MANIFEST = {"started": "2026-05-04T22:00:00.000+00:00", "lot": "FK2611-07", "recipe_sha256": "a"}


@pytest.mark.robustness
def test_a_second_run_on_a_locked_folder_is_refused_naming_the_holder(tmp_path):
    store = RunStore.create(tmp_path / "run", MANIFEST)
    with pytest.raises(FolderRefused, match=rf"in use by another run \(pid {os.getpid()} on "):
        RunStore.resume(tmp_path / "run", MANIFEST)
    store.finish("completed", "t1")
    RunStore.resume(tmp_path / "run", MANIFEST).finish("completed", "t2")  # free again


@pytest.mark.robustness
def test_the_lock_is_held_across_processes_and_freed_when_its_holder_dies(tmp_path):
    folder = tmp_path / "run"
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys, time; from pathlib import Path; "
         "from sequencer.store.runfolder import FolderLock; "
         "held = FolderLock.take(Path(sys.argv[1])); "
         "print('held', flush=True); time.sleep(60)", str(folder)],
        stdout=subprocess.PIPE, text=True, env={**os.environ, "PYTHONPATH": os.getcwd()},
    )  # fmt: skip
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(FolderRefused, match=rf"pid {holder.pid} on {platform.node()}"):
            FolderLock.take(folder)
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()
    deadline = time.monotonic() + 5
    while True:  # the kernel drops the lock with the process: no stale lock after a crash
        try:
            FolderLock.take(folder).release()
            break
        except FolderRefused:
            assert time.monotonic() < deadline
            time.sleep(0.05)


@pytest.mark.robustness
def test_a_folder_holding_a_run_is_refused_without_resume(tmp_path):
    store = RunStore.create(tmp_path / "run", MANIFEST)
    store.set_identity("TCPIP0::127.0.0.1::5025::SOCKET", "TEST,SMU,1,1")  # it reached one
    store.finish("interrupted", "t1")
    with pytest.raises(FolderRefused, match="already holds a run; add --resume") as caught:
        RunStore.create(tmp_path / "run", MANIFEST)
    assert caught.value.exit_code == 2 and isinstance(caught.value, FileExistsError)
    again = pickle.loads(pickle.dumps(caught.value))
    assert isinstance(again, CcbenchError) and str(again) == str(caught.value)


@pytest.mark.robustness
def test_resuming_with_a_changed_recipe_is_refused_unless_accepted(tmp_path):
    RunStore.create(tmp_path / "run", MANIFEST).finish("interrupted", "t1")
    changed = dict(MANIFEST, recipe_sha256="b", recipe_text="lot: FK2611-07\nnplc: 1\n")
    with pytest.raises(
        FolderRefused, match=r"another recipe or station .* --accept-changed-recipe"
    ):
        RunStore.resume(tmp_path / "run", changed)
    store = RunStore.resume(tmp_path / "run", changed, accept_changed_recipe=True)
    assert any("changed recipe" in note for note in store.progress.notes)
    store.finish("completed", "t2")
    sessions = read_manifest(tmp_path / "run")["sessions"]
    assert [s["recipe_sha256"] for s in sessions] == ["a", "b"]
    assert "recipe_text" not in sessions[0] and sessions[1]["recipe_text"].endswith("nplc: 1\n")
    db = sqlite3.connect(tmp_path / "run" / "results.sqlite")
    assert db.execute("SELECT session, recipe_sha256, status FROM session").fetchall() == [
        (1, "a", "interrupted"),
        (2, "b", "completed"),
    ]


def test_resume_on_an_empty_folder_starts_the_run(tmp_path):
    store = RunStore.resume(tmp_path / "new", MANIFEST)
    expected = f"{tmp_path / 'new'}: held no run to resume; started a new one"
    assert store.progress.notes == (expected,)
    store.finish("completed", "t1")
    assert read_manifest(tmp_path / "new")["status"] == "completed"


def test_manifest_and_run_table_trace_recipe_station_instrument_and_software(tmp_path, recipe_file):
    recipe = load(recipe_file)
    manifest = manifest_of(recipe) | {
        "operator": "J. Okafor", "host": "bench-b2", "software_version": "0.1.0",
        "simulator_seed": 2611,
    }  # fmt: skip
    store = RunStore.create(tmp_path / "run", manifest)
    store.set_identity("TCPIP0::127.0.0.1::5025::SOCKET", "CCBENCH,SIMULATED-SMU,SIM002611,0.1.0")
    measure_into(store, recipe)
    store.finish("completed", "2026-05-04T22:05:00.000+00:00")

    on_disk = json.loads((tmp_path / "run" / "manifest.json").read_text())
    for key in ("recipe_text", "recipe_sha256", "station_text", "operator", "lot", "host",
                "software_version", "simulator_seed", "started"):  # fmt: skip
        assert on_disk[key] == manifest[key], key
    assert on_disk["identity"] == "CCBENCH,SIMULATED-SMU,SIM002611,0.1.0"
    assert on_disk["finished"] == "2026-05-04T22:05:00.000+00:00"
    assert on_disk["status"] == on_disk["sessions"][0]["status"] == "completed"
    assert len(on_disk["uid"]) == 32

    db = sqlite3.connect(tmp_path / "run" / "results.sqlite")
    run = db.execute(
        "SELECT id, uid, recipe_sha256, identity, simulator_seed, finished FROM run"
    ).fetchone()
    assert run[1:] == (on_disk["uid"], recipe.digest, on_disk["identity"], 2611,
                       on_disk["finished"])  # fmt: skip
    orphans = db.execute(
        "SELECT COUNT(*) FROM point p LEFT JOIN device d ON (p.run_id, p.round, p.device) = "
        "(d.run_id, d.round, d.device) WHERE d.device IS NULL"
    ).fetchone()[0]
    per_device = db.execute(
        "SELECT COUNT(*) FROM point WHERE run_id = ? GROUP BY device", (run[0],)
    ).fetchall()
    assert orphans == 0 and {n for (n,) in per_device} == {41 + 3}


@pytest.mark.robustness
def test_an_unwritable_folder_is_one_clear_error(tmp_path, monkeypatch):
    import builtins

    real_open = builtins.open

    def read_only(path, mode="r", *args, **kwargs):
        if str(path).startswith(str(tmp_path)) and any(m in mode for m in "wax+"):
            raise OSError(30, "Read-only file system", str(path))
        return real_open(path, mode, *args, **kwargs)

    (tmp_path / "run").mkdir()
    monkeypatch.setattr(builtins, "open", read_only)
    with pytest.raises(StoreError, match=r"run: cannot be written \(Read-only file system\)"):
        RunStore.create(tmp_path / "run", MANIFEST)
    monkeypatch.undo()
    assert list((tmp_path / "run").iterdir()) == []


@pytest.mark.robustness
def test_a_folder_from_the_first_release_is_readable_but_not_resumable(tmp_path):
    folder = tmp_path / "old"
    folder.mkdir()
    db = sqlite3.connect(folder / "results.sqlite")
    db.executescript((Path(__file__).parent / "data" / "run-v1.sql").read_text())
    db.execute("PRAGMA user_version = 1")
    db.close()
    (folder / "journal.jsonl").write_text('{"device": "FK2611-03-001"}\n')
    with pytest.raises(FolderRefused, match=r"without manifest\.json .* not resumed"):
        RunStore.resume(folder, MANIFEST)
    with pytest.raises(FolderRefused, match="already holds a run"):
        RunStore.create(folder, MANIFEST)
    db = sqlite3.connect(folder / "results.sqlite")
    assert db.execute("PRAGMA user_version").fetchone() == (1,)  # refused before any change
    db.close()
