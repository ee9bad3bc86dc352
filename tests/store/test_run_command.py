"""`ccbench run` with the store's options, in process: repeated rounds, resume, refusals."""

from __future__ import annotations

import csv
import io

import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.store.runfolder import FolderLock
from tests.store.conftest import write_recipe


def ccbench(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), console=Console(file=out, width=300, highlight=False))
    return code, out.getvalue()


def rows(folder):
    with open(folder / "devices.csv", newline="") as f:
        return [(r["round"], r["device"]) for r in csv.DictReader(f)]


@pytest.fixture
def recipe(tmp_path):
    return write_recipe(tmp_path / "recipes", channels=3, points=21)


@pytest.mark.sim
def test_rounds_from_the_command_line_are_stored_with_their_number(tmp_path, recipe):
    out = tmp_path / "run"
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--rounds", "2")
    assert code == 0, text
    assert "schedule: one round straight after another, at most 2 rounds" in text
    assert "round 1 done: 3 devices" in text and "round 2 done: 3 devices" in text
    assert "run in all: 6 devices stored over 2 rounds" in text
    names = [f"FK2611-07-{c:03d}" for c in (1, 2, 3)]
    assert rows(out) == [(p, n) for p in ("1", "2") for n in names]

    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume",
                         "--rounds", "2")  # fmt: skip
    assert code == 0 and "nothing left to measure" in text and "instrument:" not in text
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume",
                         "--rounds", "3")  # fmt: skip
    assert code == 0, text
    assert [p for p, _ in rows(out)] == ["1"] * 3 + ["2"] * 3 + ["3"] * 3


@pytest.mark.sim
def test_the_recipe_repeat_key_drives_the_rounds(tmp_path):
    recipe = write_recipe(tmp_path / "r", channels=2, points=21,
                          extra="repeat: {every: 0 s, rounds: 2}\n")  # fmt: skip
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(tmp_path / "run"))
    assert code == 0, text
    assert [p for p, _ in rows(tmp_path / "run")] == ["1", "1", "2", "2"]


@pytest.mark.robustness
def test_refusals_are_one_line_and_exit_2(tmp_path, recipe):
    out = tmp_path / "run"
    code, text = ccbench("run", str(recipe), "--sim", "--resume")
    assert code == 2 and "--resume needs --out, the run's folder" in text
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out),
                         "--accept-changed-recipe")  # fmt: skip
    assert code == 2 and "--accept-changed-recipe needs --resume" in text
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--for", "8 h")
    assert code == 2 and "--for needs --every as well" in text

    held = FolderLock.take(out)
    try:
        code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume")
    finally:
        held.release()
    lines = [ln for ln in text.splitlines() if ln.startswith("ccbench:")]
    assert code == 2 and len(lines) == 1 and "in use by another run (pid " in lines[0]
    assert "instrument:" not in text

    (out / "manifest.json").write_text("{}")
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out))
    assert code == 2 and "already holds a run; add --resume to continue it" in text
