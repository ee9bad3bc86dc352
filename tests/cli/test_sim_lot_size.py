"""The embedded simulator holds as many devices as the station's tray has channels, or the
station's `simulator.devices`, so a dry run can have a real lot's size (docs/speed.md)."""

from __future__ import annotations

import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.load import load_station

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def bench(tmp_path) -> Path:
    for name in ("demo-production.yaml", "demo-station.yaml"):
        shutil.copy(ROOT / "recipes" / name, tmp_path / name)
    return tmp_path


def _station(bench: Path, old: str, new: str) -> Path:
    station = bench / "demo-station.yaml"
    text = station.read_text()
    assert old in text
    station.write_text(text.replace(old, new))
    return station


def test_the_simulator_holds_the_whole_tray(bench):
    station = _station(bench, "channels: 1-20", "channels: 1-25")
    assert load_station(station).simulator_options["devices"] == 25


def test_a_tray_may_hold_a_whole_lot(bench):
    station = _station(bench, "channels: 1-20", "channels: 1-100000")
    assert load_station(station).simulator_options["devices"] == 100_000


def test_the_station_may_name_the_simulated_lot_size(bench):
    station = _station(bench, "  seed: 2611\n", "  seed: 2611\n  devices: 500\n")
    assert load_station(station).simulator_options["devices"] == 500


def test_a_lot_size_that_is_not_a_count_is_one_line(bench):
    station = _station(bench, "  seed: 2611\n", "  seed: 2611\n  devices: 0\n")
    with pytest.raises(RecipeError, match=r"simulator\.devices.*invalid"):
        load_station(station)


@pytest.mark.sim
def test_a_dry_run_measures_a_tray_beyond_twenty_devices(bench):
    _station(bench, "channels: 1-20", "channels: 1-24")
    _station(bench, "clock: real", "clock: virtual")
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", "demo-production.yaml", "--sim",
         "--out", "run"],
        cwd=bench, capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stdout + done.stderr
    db = sqlite3.connect(bench / "run" / "results.sqlite")
    try:
        (count,) = db.execute("SELECT count(*) FROM device").fetchone()
    finally:
        db.close()
    assert count == 24
