"""`ccbench run` over temperatures as a user runs it: real processes for ccbench, the simulated
SMU and the simulated chamber. Each set point is one round, its temperatures stored with every
device; every ending leaves the output off first, then the chamber at its safe set point, and
says both in the last line."""

from __future__ import annotations

import csv
import sqlite3
import subprocess
import sys
from pathlib import Path

from tests.support.stations import write_recipe, write_station

ROOT = Path(__file__).resolve().parents[2]
CHAMBER = (
    "chamber: {{resource: sim, lowest: -40 degC, highest: 125 degC, rate: 20 K/min, "
    "safe: 25 degC, simulator: {{speed: 3000, tau_air: 60, tau_mount: 300{faults}}}}}\n"
)


def run(tmp_path: Path, temps: str, faults: str = "") -> subprocess.CompletedProcess[str]:
    station = write_station(tmp_path, channels=2, extra=CHAMBER.format(faults=faults))
    recipe = write_recipe(tmp_path, station, points=11, extra=f"temperatures: {temps}\n")
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--out", str(tmp_path / "r")],
        cwd=ROOT, capture_output=True, text=True, timeout=120,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "300", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def stored(tmp_path: Path) -> list[tuple]:
    db = sqlite3.connect(tmp_path / "r" / "results.sqlite")
    query = "SELECT round, device, set_point_C, chamber_C, fixture_C FROM device ORDER BY seq"
    return db.execute(query).fetchall()


def test_each_set_point_is_a_round_with_its_temperatures_stored(tmp_path):
    done = run(tmp_path, "[25 degC, {set: 85 degC, band: 0.5 K, for: 2 min}]")
    assert done.returncode == 0, done.stdout + done.stderr
    rows = stored(tmp_path)
    assert [(r[0], r[2]) for r in rows] == [(1, 25.0), (1, 25.0), (2, 85.0), (2, 85.0)]
    assert all(abs(r[3] - r[2]) <= 0.5 for r in rows)  # within the band once stable
    assert all(r[4] is not None and r[4] < 85.0 for r in rows[2:])  # the mount trails the air
    last = done.stdout.strip().splitlines()[-1]
    smu, chamber = last.index("output off (read back"), last.index("chamber set to 25 degC")
    assert smu < chamber  # the output first, then the chamber: both read back
    # each device's coefficient over its two stored temperatures, in tempco.csv and on screen
    with open(tmp_path / "r" / "tempco.csv", encoding="utf-8") as file:
        tempcos = list(csv.DictReader(file))
    assert [(t["device"], t["points"]) for t in tempcos] == [(r[1], "2") for r in rows[:2]]
    assert all(f"tempco {t['device']}: " in done.stdout for t in tempcos)


def test_a_soak_that_never_settles_is_one_line_output_off_chamber_safe_nothing_lost(tmp_path):
    temps = "[25 degC, {set: 85 degC, for: 2 min, timeout: 10 min}]"
    done = run(tmp_path, temps, faults=", faults: [weak]")  # the chamber gets 20 K from the room
    assert done.returncode != 0
    lines = [line for line in done.stderr.splitlines() if line.startswith("ccbench:")]
    assert len(lines) == 1, done.stdout + done.stderr
    assert "did not settle at 85 degC within 600 s" in lines[0]
    assert "output off (read back" in lines[0] and "chamber set to 25 degC (read back)" in lines[0]
    assert [(r[0], r[2]) for r in stored(tmp_path)] == [(1, 25.0), (1, 25.0)]  # round 1 kept
    assert "Traceback" not in done.stderr
