"""Stored results that cannot be read (an empty results.sqlite, a table lost with a killed run's
WAL) are named by every command that reads them, in one line with exit code 2 (bad input),
never a traceback, and never the write-failure code 5."""

from __future__ import annotations

import io
import sqlite3
from pathlib import Path

import pytest
from rich.console import Console

from sequencer.cli.main import main
from tests.report.conftest import lot_parts, write_run


def run(argv: list[str]) -> tuple[int, str]:
    console = Console(file=io.StringIO(), width=200)
    return main(argv, console=console), console.file.getvalue()


@pytest.fixture
def damaged(tmp_path) -> dict[str, Path]:
    parts = lot_parts("FK2611-07", n=24)
    empty = write_run(tmp_path / "empty", "FK2611-07", parts, "2026-11-02T10:00:00+00:00")
    (empty / "results.sqlite").write_bytes(b"")
    lost = write_run(tmp_path / "lost", "FK2611-07", parts, "2026-11-02T10:00:00+00:00")
    with sqlite3.connect(lost / "results.sqlite") as db:
        db.execute("DROP TABLE point")
        db.execute("DROP TABLE device")
    return {"empty": empty, "lost": lost}


@pytest.mark.parametrize("which", ["empty", "lost"])
@pytest.mark.parametrize("command", [["results"], ["report", "--text"], ["rejudge"]])
def test_every_reader_names_a_damaged_store(damaged, which, command):
    folder = damaged[which]
    argv = [command[0], str(folder), *command[1:]]
    if command[0] == "rejudge":
        argv += ["--recipe", str(Path(__file__).resolve().parents[2] / "recipes" / "demo.yaml")]
    code, said = run(argv)
    assert code == 2, said
    assert f"{folder}/results.sqlite: cannot be read" in said
    assert len(said.strip().splitlines()) == 1
