"""`ccbench check` as a user runs it: a real process, its exit code and its one line."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def ccbench(*args: str, cwd: Path = ROOT) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=cwd, capture_output=True, text=True, timeout=60,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def test_check_demo_prints_the_plan():
    done = ccbench("check", "recipes/demo.yaml")
    assert done.returncode == 0, done.stdout + done.stderr
    assert "20 devices x 86 points" in done.stdout
    assert "peak 40 V" in done.stdout


@pytest.mark.robustness
def test_check_broken_recipe_gives_one_line_and_exit_2(tmp_path):
    (tmp_path / "demo-station.yaml").write_text((ROOT / "recipes/demo-station.yaml").read_text())
    text = (ROOT / "recipes/demo.yaml").read_text().replace("compliance: 5 mA", "compliance: 5", 1)
    (tmp_path / "broken.yaml").write_text(text)
    done = ccbench("check", str(tmp_path / "broken.yaml"))
    assert done.returncode == 2
    lines = done.stdout.strip().splitlines()
    assert len(lines) == 1, done.stdout
    line = text.splitlines().index("      compliance: 5") + 1
    assert lines[0].startswith(
        f"ccbench: {tmp_path / 'broken.yaml'}:{line}: steps[0].sweep.compliance"
    )
    assert "needs a unit" in lines[0]
    assert "Traceback" not in done.stderr


@pytest.mark.robustness
def test_over_limit_recipe_is_refused_before_any_instrument(tmp_path):
    (tmp_path / "demo-station.yaml").write_text((ROOT / "recipes/demo-station.yaml").read_text())
    text = (ROOT / "recipes/demo.yaml").read_text().replace("stop: 40 V", "stop: 75 V")
    (tmp_path / "hot.yaml").write_text(text)
    # A resource nobody listens on: if anything tried to connect, the error would differ.
    done = ccbench("run", str(tmp_path / "hot.yaml"), "--out", str(tmp_path / "out"))
    assert done.returncode == 3
    assert "step 'iv' reaches 75 V, above the station's maximum 60 V" in done.stdout
    assert not (tmp_path / "out").exists()
