"""The run folder's lock cannot be stolen by deleting or replacing a file: a second run is refused
while the first lives, and a run whose lock was taken away writes nothing more (it stops, and the
existing shutdown switches the output off)."""

from __future__ import annotations

import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.model.errors import StoreError
from sequencer.store.runfolder import LOCK_FILE, FolderLock, FolderRefused, LockLost, read_manifest
from sequencer.store.runstore import RunStore
from tests.store.conftest import load, manifest_of, measure_into, write_recipe

ROOT = Path(__file__).resolve().parents[2]
MANIFEST = {"started": "2026-05-04T22:00:00.000+00:00", "lot": "FK2611-07", "recipe_sha256": "a"}

pytestmark = pytest.mark.robustness


def test_deleting_run_lock_does_not_let_a_second_run_in(tmp_path):
    first = FolderLock.take(tmp_path / "run")
    try:
        (tmp_path / "run" / LOCK_FILE).unlink()
        refused = rf"in use by another run \(holder unknown: its {LOCK_FILE} was removed\)"
        with pytest.raises(FolderRefused, match=refused):  # (a second open file description:
            FolderLock.take(tmp_path / "run")  # its flock conflicts within one process too)
        assert not (tmp_path / "run" / LOCK_FILE).exists()  # the refused run created nothing
        with pytest.raises(LockLost, match=rf"{LOCK_FILE} was removed"):
            first.check()
    finally:
        first.release()
    FolderLock.take(tmp_path / "run").release()  # free again once its holder let go


def test_a_replaced_lock_file_or_folder_is_no_longer_the_lock(tmp_path):
    folder = tmp_path / "run"
    first = FolderLock.take(folder)
    (folder / "copy").write_text((folder / LOCK_FILE).read_text())
    os.replace(folder / "copy", folder / LOCK_FILE)
    with pytest.raises(LockLost, match=rf"{LOCK_FILE} was replaced"):
        first.check()
    first.release()

    first = FolderLock.take(folder)
    folder.rename(tmp_path / "moved")
    with pytest.raises(LockLost, match="the folder was removed"):
        first.check()
    second = FolderLock.take(folder)  # a new folder under the old name: not the first's
    try:
        second.check()
        with pytest.raises(LockLost, match="the folder was replaced"):
            first.check()
        folder.rename(tmp_path / "moved-too")
        (tmp_path / "moved").rename(folder)  # the first's folder back under the name: still not
        with pytest.raises(LockLost, match="the folder was replaced"):  # the second's
            second.check()
        first.check()
    finally:
        first.release()
        second.release()


def test_a_store_whose_lock_was_taken_writes_nothing_more(tmp_path, recipe_file):
    recipe = load(recipe_file)
    folder = tmp_path / "run"
    store = RunStore.create(folder, manifest_of(recipe))
    store.set_identity("TCPIP0::127.0.0.1::5025::SOCKET", "TEST,SMU,1,1")
    written: dict[str, bytes] = {}

    def after(done) -> None:  # two devices stored, then the lock file goes
        if done.index == 1:
            for name in ("journal.jsonl", "devices.csv", "manifest.json"):
                written[name] = (folder / name).read_bytes()
            (folder / LOCK_FILE).unlink()

    with pytest.raises(LockLost) as caught:
        measure_into(store, recipe, on_device=after)
    assert isinstance(caught.value, StoreError) and caught.value.exit_code == 5
    assert "stopped before writing" in str(caught.value)
    with pytest.raises(LockLost):
        store.set_identity("TCPIP0::127.0.0.1::5025::SOCKET", "TEST,SMU,1,1")
    with pytest.raises(LockLost):
        store.begin_round(2)  # a pass does not begin: nothing is measured to be thrown away
    problem = store.finish("failed", "2026-05-04T22:05:00.000+00:00")
    assert problem.endswith(f"the run's lock was taken away: {LOCK_FILE} was removed)")
    for name, data in written.items():  # the manifest, too: the run's end is not ours to write
        assert (folder / name).read_bytes() == data, name
    assert (folder / "journal.jsonl").read_bytes().count(b"\n") == 2
    assert read_manifest(folder)["status"] == "running"


def test_two_real_runs_never_write_one_folder_when_run_lock_is_deleted(tmp_path):
    """The red-team reproduction with real processes: `ccbench run` in a folder, run.lock
    deleted while it waits for its second round, a second `ccbench run --resume` into the same
    folder. The second is refused while the first lives, or (if the first reached its next write
    first) the first stopped safely before the second came in; each device is journalled once."""
    recipe = write_recipe(tmp_path / "recipes", channels=4)
    out = tmp_path / "run"
    first = _run(recipe, out, "--every", "6 s", "--rounds", "2")
    seen = []
    for line in first.stdout:  # the first pass done, the second not begun: a wait, no writes
        seen.append(line)
        if line.startswith("round 2 starts at"):
            break
    assert first.poll() is None, "".join(seen)
    (out / LOCK_FILE).unlink()
    readings = _readings(out)
    second = _run(recipe, out, "--resume")
    second_screen = second.communicate(timeout=120)[0]
    first_screen = "".join(seen) + first.communicate(timeout=120)[0]

    stopped = "the run's lock was taken away (run.lock was removed); stopped before writing"
    assert first.returncode == 5 and stopped in first_screen, first_screen
    assert "output off (read back from the instrument)" in first_screen.splitlines()[-1]
    if second.returncode == 2:  # refused while the first held the folder
        assert "in use by another run" in second_screen, second_screen
        assert _readings(out) == readings  # the first began no pass: nothing measured in vain
    else:  # came in after the first had stopped: it finished the run alone
        assert second.returncode == 0, second_screen
    entries = [json.loads(line) for line in (out / "journal.jsonl").read_text().splitlines()]
    keys = [(e["round"], e["device"]) for e in entries]
    assert len(keys) == len(set(keys)), keys  # no device measured twice
    assert [e["seq"] for e in entries] == list(range(1, len(entries) + 1))
    sessions = [e["session"] for e in entries]
    assert sessions == sorted(sessions)  # one writer after the other, never both at once
    expected = 8 if second.returncode == 0 else 4  # two rounds of 4, or the first round alone
    assert len(entries) == expected, (first_screen, second_screen)


def _run(recipe: Path, out: Path, *extra: str) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim", "--out", str(out),
         *extra],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def test_a_lock_taken_between_the_journal_and_the_database_stops_there(tmp_path, recipe_file):
    recipe = load(recipe_file)
    folder = tmp_path / "run"
    store = RunStore.create(folder, manifest_of(recipe))
    append = store.journal.append

    def append_then_lose_the_lock(entry):  # the lock goes while the journal line is written
        seq = append(entry)
        (folder / LOCK_FILE).unlink()
        return seq

    store.journal.append = append_then_lose_the_lock
    with pytest.raises(LockLost, match="stopped with the result of FK2611-07-001 in the journal"):
        measure_into(store, recipe)
    store.finish("failed", "2026-05-04T22:05:00.000+00:00")
    assert (folder / "journal.jsonl").read_bytes().count(b"\n") == 1
    db = sqlite3.connect(folder / "results.sqlite")
    assert db.execute("SELECT COUNT(*) FROM device").fetchone() == (0,)  # --resume catches up
    db.close()


def _readings(out: Path) -> int:
    """Readings taken so far, as the SCPI log shows them (each exchange is a line)."""
    return sum("READ?" in line for line in (out / "scpi.log").read_text().splitlines())
