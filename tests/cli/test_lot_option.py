"""`--lot` gives the lot at run time (no recipe edit, the same recipe hash), and a lot name is
never a path: the default run folder stays inside runs/."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.store.runfolder import folder_name

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize(
    ("lot", "name"),
    [
        ("FK2611-07", "FK2611-07"),
        ("../../x", "_.._x"),
        ("/etc/cron.d", "_etc_cron.d"),
        ("a/b", "a_b"),
        ("..", "_"),
        ("lot 7; rm -rf ~", "lot_7_rm_-rf_"),
    ],
)
def test_a_lot_becomes_one_folder_name(lot, name):
    assert folder_name(lot) == name
    assert "/" not in folder_name(lot) and not folder_name(lot).startswith(".")


def _ccbench(cwd: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=180,
    )


@pytest.fixture
def bench(tmp_path) -> Path:
    for name in ("demo.yaml", "demo-station.yaml"):
        shutil.copy(ROOT / "recipes" / name, tmp_path / name)
    return tmp_path


@pytest.mark.sim
def test_a_lot_named_like_a_path_stays_inside_runs(bench):
    recipe = bench / "demo.yaml"
    recipe.write_text(recipe.read_text().replace("lot: FK2611-07", "lot: ../../escaped/x"))
    done = _ccbench(bench, "run", "demo.yaml", "--sim")
    assert done.returncode == 0, done.stdout + done.stderr
    assert not (bench.parent.parent / "escaped").exists()
    (folder,) = (bench / "runs").iterdir()
    assert folder.name.startswith("_.._escaped_x-")
    assert "is not a folder name" in done.stdout


@pytest.mark.sim
def test_the_lot_given_at_run_time_is_recorded_and_kept_on_resume(bench):
    done = _ccbench(bench, "run", "demo.yaml", "--sim", "--lot", "FK2611-09", "--out", "runs/a")
    assert done.returncode == 0, done.stdout + done.stderr
    manifest = json.loads((bench / "runs" / "a" / "manifest.json").read_text())
    assert manifest["lot"] == "FK2611-09"
    again = _ccbench(
        bench, "run", "demo.yaml", "--sim", "--lot", "FK2611-10", "--out", "runs/a", "--resume"
    )
    assert again.returncode == 2
    assert "holds lot 'FK2611-09', not 'FK2611-10'" in again.stdout + again.stderr
