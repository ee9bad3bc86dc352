"""`ccbench check` on a recipe with set points, as a user runs it: a set point beyond the station's
chamber range is refused in one line with exit 3, before any instrument is started."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from tests.support.stations import write_recipe, write_station

ROOT = Path(__file__).resolve().parents[2]
CHAMBER = (
    "chamber: {resource: sim, lowest: -40 degC, highest: 125 degC, rate: 5 K/min, safe: 'off'}\n"
)


def ccbench(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=ROOT, capture_output=True, text=True, timeout=60,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def test_set_points_within_the_range_check_clean(tmp_path):
    station = write_station(tmp_path, extra=CHAMBER)
    recipe = write_recipe(tmp_path, station, extra="temperatures: [-20 degC, 25 degC, 85 degC]\n")
    done = ccbench("check", str(recipe))
    assert done.returncode == 0, done.stdout + done.stderr


def test_a_set_point_beyond_the_chamber_is_one_line_and_exit_3(tmp_path):
    station = write_station(tmp_path, extra=CHAMBER)
    recipe = write_recipe(tmp_path, station, extra="temperatures: [25 degC, 150 degC]\n")
    done = ccbench("check", str(recipe))
    lines = done.stderr.strip().splitlines()
    assert done.returncode == 3 and len(lines) == 1 and not done.stdout, done.stdout + done.stderr
    assert lines[0].startswith("ccbench: temperatures[1]: set point 150 degC is outside")
    assert "Traceback" not in done.stderr
