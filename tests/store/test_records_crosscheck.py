"""The journal, the database and the manifest checked against each other by every reader
(red-team finding 20: a device deleted from results.sqlite made results, report and rejudge
show 19 devices without a word while the journal held 20; a journal line deleted, or a verdict
edited in the database, went unnoticed)."""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Callable
from pathlib import Path

import pytest

from sequencer.model.errors import StoreReadError
from sequencer.report.data import load_lot
from sequencer.store import export, rejudge
from sequencer.store.runstore import RunStore
from tests.store.conftest import load, manifest_of, measure_into

READERS: dict[str, Callable[[Path], object]] = {
    "results": export.load_run,
    "report": lambda folder: load_lot([folder]),
    "rejudge": rejudge.load_run,
}


@pytest.fixture
def ended(tmp_path, recipe_file) -> Path:
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    measure_into(store, recipe)
    store.finish("completed", "t1")
    return tmp_path / "run"


def _sql(folder: Path, *statements: str) -> None:
    db = sqlite3.connect(folder / "results.sqlite")
    for statement in statements:
        db.execute(statement)
    db.commit()
    db.close()


def _device(folder: Path, index: int) -> str:
    lines = (folder / "journal.jsonl").read_text().splitlines()
    return json.loads(lines[index])["device"]


@pytest.mark.parametrize("reader", READERS)
def test_an_untouched_run_reads(ended, reader):
    READERS[reader](ended)


@pytest.mark.parametrize("reader", READERS)
def test_a_device_deleted_from_the_database_is_named(ended, reader):
    gone = _device(ended, 1)
    _sql(ended, f"DELETE FROM point WHERE device = '{gone}'",
         f"DELETE FROM device WHERE device = '{gone}'")  # fmt: skip
    with pytest.raises(StoreReadError, match=r"records disagree.*number of devices"):
        READERS[reader](ended)


@pytest.mark.parametrize("reader", READERS)
def test_a_verdict_edited_in_the_database_is_named(ended, reader):
    flip = "CASE verdict WHEN 'pass' THEN 'fail' ELSE 'pass' END"
    _sql(ended, f"UPDATE device SET verdict = {flip} WHERE rowid = (SELECT MIN(rowid) FROM device)")
    with pytest.raises(StoreReadError, match="results are not those recorded"):
        READERS[reader](ended)


@pytest.mark.parametrize("reader", READERS)
def test_a_journal_line_deleted_is_named(ended, reader):
    journal = ended / "journal.jsonl"
    lines = journal.read_bytes().splitlines(keepends=True)
    journal.write_bytes(b"".join(lines[:1] + lines[2:]))
    with pytest.raises(StoreReadError, match=r"journal\.jsonl is not the size"):
        READERS[reader](ended)


@pytest.mark.parametrize("reader", READERS)
def test_a_verdict_edited_in_the_journal_alone_is_named_though_the_size_is_the_same(ended, reader):
    """`"fail"` and `"pass"` are the same length: the size alone would not tell."""
    journal = ended / "journal.jsonl"
    text = journal.read_bytes()
    edited = text.replace(b'"verdict":"pass"', b'"verdict":"fail"', 1)
    if edited == text:
        edited = text.replace(b'"verdict":"fail"', b'"verdict":"pass"', 1)
    assert edited != text and len(edited) == len(text)
    journal.write_bytes(edited)
    with pytest.raises(StoreReadError, match=r"journal\.jsonl does not hold the bytes"):
        READERS[reader](ended)


def test_a_run_recorded_before_the_journal_digest_is_checked_by_size(ended):
    manifest = json.loads((ended / "manifest.json").read_text())
    del manifest["records"]["journal_sha256"]
    (ended / "manifest.json").write_text(json.dumps(manifest))
    assert len(export.load_run(ended)) > 0


def test_a_run_that_never_ended_is_read_as_it_is(tmp_path, recipe_file):
    """A crash leaves no end record (its resume checks and brings the files together)."""
    recipe = load(recipe_file)
    store = RunStore.create(tmp_path / "run", manifest_of(recipe))
    measure_into(store, recipe)
    for close in (store.db.close, store.journal.close, store.csv_file.close, store.lock.release):
        close()
    assert len(export.load_run(tmp_path / "run")) > 0


def test_a_run_from_before_the_check_is_read_as_it_is(ended):
    manifest = json.loads((ended / "manifest.json").read_text())
    del manifest["records"]
    (ended / "manifest.json").write_text(json.dumps(manifest))
    _sql(ended, "UPDATE device SET verdict = 'fail'")
    assert len(export.load_run(ended)) > 0
