"""Resume in process: the device in flight is measured again, none is stored twice, and a
database or CSV that lags behind the journal is brought up to date from it."""

from __future__ import annotations

import csv
import json
import sqlite3
from dataclasses import replace

import pytest

from sequencer.bench.lotrun import run_lot
from sequencer.model.errors import StoreError
from sequencer.plan.make import make_plan
from sequencer.store import database
from sequencer.store.runstore import RunStore
from tests.store.conftest import load, manifest_of, measure_into, sim_smu
from tests.store.conftest import stored as devices


class StopAt:
    """An SMU that raises KeyboardInterrupt at its `n`-th reading (a Ctrl-C mid-device)."""

    def __init__(self, smu, n: int) -> None:
        self.smu, self.n = smu, n

    def __getattr__(self, name):
        return getattr(self.smu, name)

    def measure(self):
        self.n -= 1
        if self.n == 0:
            raise KeyboardInterrupt
        return self.smu.measure()


def die(store: RunStore) -> None:
    """What a SIGKILL leaves: files closed by the kernel, nothing recorded, the lock gone."""
    for close in (store.db.close, store.journal.close, store.csv_file.close, store.lock.release):
        close()


def csv_devices(folder):
    with open(folder / "devices.csv", newline="") as f:
        return [(r["round"], r["device"], r["verdict"]) for r in csv.DictReader(f)]


@pytest.fixture
def clean(tmp_path, recipe_file):
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "clean", manifest_of(recipe))
    measure_into(store, recipe)
    store.finish("completed", "t1")
    return devices(tmp_path / "clean")


@pytest.mark.robustness
def test_an_interrupted_device_is_measured_again_and_stored_once(tmp_path, recipe_file, clean):
    recipe = load(recipe_file)
    plan = make_plan(recipe)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    stopping = StopAt(sim_smu(recipe), n=2 * plan.points_per_device + 10)  # in device 3
    with pytest.raises(KeyboardInterrupt):
        run_lot(recipe, plan, stopping, store, lambda done: None)
    store.finish("interrupted", "t1")
    assert [v for *_, v in csv_devices(tmp_path / "run")] == ["pass", "pass", "aborted"]

    store = RunStore.resume(tmp_path / "run", manifest_of(recipe))
    assert store.progress.done == {1, 2} and store.progress.round_no == 1
    remaining = replace(plan, channels=tuple(c for c in plan.channels if c not in {1, 2}))
    measure_into(store, recipe, remaining)
    store.finish("completed", "t2")

    assert devices(tmp_path / "run") == clean
    names = [d for _, d, _ in csv_devices(tmp_path / "run")]
    assert sorted(names) == sorted(set(names)) and len(names) == len(plan.channels)
    journal = (tmp_path / "run" / "journal.jsonl").read_text().splitlines()
    assert len(journal) == len(plan.channels) + 1  # the aborted attempt stays on record


@pytest.mark.robustness
def test_a_crash_between_journal_and_database_is_made_good_on_resume(
    tmp_path, recipe_file, clean, monkeypatch
):
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    real, calls = database.write_device, []

    def fails_third(db, run_id, entry):
        calls.append(entry["device"])
        if len(calls) == 3:
            raise sqlite3.OperationalError("database or disk is full")
        return real(db, run_id, entry)

    monkeypatch.setattr(database, "write_device", fails_third)
    with pytest.raises(StoreError, match=r"is in the journal but not in results\.sqlite"):
        measure_into(store, recipe)
    monkeypatch.undo()
    die(store)
    assert len(devices(tmp_path / "run")[0]) == 2
    assert len((tmp_path / "run" / "journal.jsonl").read_text().splitlines()) == 3

    store = RunStore.resume(tmp_path / "run", manifest_of(recipe))
    assert "caught up with the journal" in " ".join(store.progress.notes)
    assert store.progress.done == {1, 2, 3}  # the third is stored now, not measured again
    plan = make_plan(recipe)
    measure_into(store, recipe, replace(plan, channels=plan.channels[3:]))
    store.finish("completed", "t2")
    assert devices(tmp_path / "run") == clean
    assert len(csv_devices(tmp_path / "run")) == len(plan.channels)


@pytest.mark.robustness
@pytest.mark.parametrize("damage", ["missing", "garbage"])
def test_a_lost_or_damaged_database_is_rebuilt_from_the_journal(tmp_path, recipe_file, damage):
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    measure_into(store, recipe)
    die(store)
    before = devices(tmp_path / "run")
    path = tmp_path / "run" / "results.sqlite"
    for suffix in ("-wal", "-shm"):
        path.with_name(path.name + suffix).unlink(missing_ok=True)
    if damage == "missing":
        path.unlink()
    else:
        path.write_bytes(b"not a database" * 100)
    store = RunStore.resume(tmp_path / "run", manifest_of(recipe))
    store.finish("completed", "t2")
    assert devices(tmp_path / "run") == before
    if damage == "garbage":
        assert list((tmp_path / "run").glob("results.sqlite.damaged-*"))
        assert any("rebuilt from the journal" in n for n in store.progress.notes)


@pytest.mark.robustness
def test_a_torn_journal_line_is_dropped_and_its_device_measured_again(tmp_path, recipe_file, clean):
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    plan = make_plan(recipe)
    measure_into(store, recipe, replace(plan, channels=plan.channels[:3]))
    die(store)
    journal = tmp_path / "run" / "journal.jsonl"
    data = journal.read_bytes()
    journal.write_bytes(data[: data.rstrip(b"\n").rfind(b"\n") + 1] + data.splitlines()[-1][:99])
    db = sqlite3.connect(tmp_path / "run" / "results.sqlite")  # as if the crash hit mid-line:
    db.execute("DELETE FROM point WHERE device LIKE '%-003'")  # the database never had it
    db.execute("DELETE FROM device WHERE device LIKE '%-003'")
    db.commit()
    db.close()

    store = RunStore.resume(tmp_path / "run", manifest_of(recipe))
    assert any("dropped a torn last line (99 bytes)" in n for n in store.progress.notes)
    assert store.progress.done == {1, 2}
    measure_into(store, recipe, replace(plan, channels=plan.channels[2:]))
    store.finish("completed", "t2")
    assert devices(tmp_path / "run") == clean


@pytest.mark.robustness
def test_a_database_ahead_of_its_journal_is_refused(tmp_path, recipe_file):
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    measure_into(store, recipe)
    die(store)
    (tmp_path / "run" / "journal.jsonl").write_text("")
    with pytest.raises(
        StoreError, match=r"holds entries up to \d+, journal\.jsonl ends at entry 0"
    ):
        RunStore.resume(tmp_path / "run", manifest_of(recipe))


@pytest.mark.robustness
def test_a_torn_last_line_the_database_holds_is_written_again_from_it(tmp_path, recipe_file):
    """Red-team finding 29: resume cut the torn line, then refused ("keep the folder as it
    is") because the database held its device: the folder was changed and still refused. The
    line is now written again from the database, and nothing is measured twice."""
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    plan = make_plan(recipe)
    measure_into(store, recipe, replace(plan, channels=plan.channels[:3]))
    die(store)
    journal = tmp_path / "run" / "journal.jsonl"
    whole = journal.read_bytes()
    last = whole.splitlines()[-1]
    journal.write_bytes(whole[: whole.rstrip(b"\n").rfind(b"\n") + 1] + last[:99])

    store = RunStore.resume(tmp_path / "run", manifest_of(recipe))
    assert any("torn last line (entry 3) was written again" in n for n in store.progress.notes)
    assert store.progress.done == {1, 2, 3}
    store.finish("completed", "t2")
    rebuilt = json.loads(journal.read_bytes().splitlines()[2])
    original = json.loads(last)
    assert {k: v for k, v in rebuilt.items() if k in original} == original


@pytest.mark.robustness
def test_a_repeated_journal_line_is_refused_at_its_line_with_nothing_changed(tmp_path, recipe_file):
    """Red-team finding 29: a duplicated line made the refusal name the wrong entry."""
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    plan = make_plan(recipe)
    measure_into(store, recipe, replace(plan, channels=plan.channels[:3]))
    die(store)
    journal = tmp_path / "run" / "journal.jsonl"
    lines = journal.read_bytes().splitlines(keepends=True)
    journal.write_bytes(b"".join([lines[0], lines[1], lines[1], lines[2]]))
    before = journal.read_bytes()
    with pytest.raises(StoreError, match=r"journal\.jsonl:3: repeats entry 2 after entry 2"):
        RunStore.resume(tmp_path / "run", manifest_of(recipe))
    assert journal.read_bytes() == before
