"""A real `ccbench run` process killed with SIGKILL at seeded random moments and resumed each
time: every device ends up stored exactly once, with the same figures and raw points as an
uninterrupted run of the same seed gives (the simulator's noise is drawn per channel, so a
device measured again on a freshly started simulator reads the same)."""

from __future__ import annotations

import csv
import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.store.conftest import stored, write_recipe

ROOT = Path(__file__).resolve().parents[2]
KILLS = 10  # SIGKILLs per test run; each resumed run is killed again until this many
SEED = 20260504
CHANNELS = 20  # the simulated tray holds 20

pytestmark = [pytest.mark.sim, pytest.mark.robustness]


def start(recipe: Path, out: Path, *extra: str) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim", "--out", str(out),
         *extra],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def journal_lines(out: Path) -> int:
    try:
        return (out / "journal.jsonl").read_bytes().count(b"\n")
    except FileNotFoundError:
        return 0


def kill_at_random(proc: subprocess.Popen[str], out: Path, rng: random.Random) -> str | None:
    """SIGKILL `proc` at a random moment: during start-up, or within the device after one or
    two more journal lines. Returns what was aimed at, or None if the run ended first."""
    if rng.random() < 0.3:  # somewhere in start-up, at the latest as the first device lands
        aim, deadline = "start-up", time.monotonic() + rng.uniform(0.2, 1.0)
        before = journal_lines(out)
        while time.monotonic() < deadline and journal_lines(out) == before and proc.poll() is None:
            time.sleep(0.002)
    else:
        target = journal_lines(out) + rng.randint(1, 2)
        aim = f"after journal line {target}"
        while journal_lines(out) < target and proc.poll() is None:
            time.sleep(0.002)
        time.sleep(rng.uniform(0.0, 0.06))  # about one device
    if proc.poll() is not None:
        return None
    os.kill(proc.pid, signal.SIGKILL)
    return aim


def csv_devices(out: Path) -> list[str]:
    with open(out / "devices.csv", newline="") as f:
        return [r["device"] for r in csv.DictReader(f)]


def test_sigkill_at_random_moments_and_resume_stores_every_device_once(tmp_path):
    recipe = write_recipe(tmp_path / "recipes", channels=CHANNELS, points=41)
    clean = start(recipe, tmp_path / "clean")  # the uninterrupted run, alongside
    out, rng, aims, screens = tmp_path / "run", random.Random(SEED), [], []
    while len(aims) < KILLS:
        proc = start(recipe, out, "--resume")
        aim = kill_at_random(proc, out, rng)
        screens.append(proc.communicate(timeout=60)[0])
        assert aim is not None, f"run ended before kill {len(aims) + 1}:\n{screens[-1]}"
        assert proc.returncode == -signal.SIGKILL
        aims.append(aim)
    final = start(recipe, out, "--resume")
    text = final.communicate(timeout=120)[0]
    assert final.returncode == 0, text
    assert clean.wait(timeout=120) == 0, clean.communicate()[0]
    clean.stdout.close()

    names = [f"FK2611-07-{c:03d}" for c in range(1, CHANNELS + 1)]
    assert csv_devices(out) == names  # each device once, in tray order
    assert stored(out) == stored(tmp_path / "clean")
    journal = (out / "journal.jsonl").read_text().splitlines()
    assert len(journal) == CHANNELS  # a SIGKILL leaves no aborted entry: nothing twice
    db = sqlite3.connect(out / "results.sqlite")
    sessions = [s for (s,) in db.execute("SELECT status FROM session ORDER BY session")]
    db.close()
    assert len(sessions) <= KILLS + 1 and sessions[-1] == "completed"
    assert set(sessions[:-1]) == {"ended unrecorded"}  # each killed session, as such
    assert sum("start-up" in a for a in aims) >= 1 and sum("journal" in a for a in aims) >= 5
