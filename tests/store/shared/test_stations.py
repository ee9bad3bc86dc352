"""Three simulated stations (separate `ccbench run` processes, each with its own embedded
simulator) test in parallel against one PostgreSQL, which is stopped in the middle and started
again: every station keeps testing, and afterwards every result is in the database once."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from tests.support.postgres import needs_psycopg
from tests.support.stations import write_recipe, write_station

psycopg = needs_psycopg()

pytestmark = [pytest.mark.sim, pytest.mark.robustness]

ROOT = Path(__file__).resolve().parents[3]
CHANNELS = 20  # the embedded simulator holds 20 devices
SLOW_SWEEP = (
    "  - sweep: {name: slow, start: 1 V, stop: 30 V, points: 30, compliance: 5 mA, settle: 5 ms}"
)


def until(condition: Callable[[], bool], what: str, timeout_s: float = 45.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"waited {timeout_s} s for {what}")
        time.sleep(0.05)


def journal_lines(folder: Path) -> int:
    path = folder / "journal.jsonl"
    return path.read_bytes().count(b"\n") if path.exists() else 0


def stored_per_station(url: str) -> dict[str, int]:
    try:
        with psycopg.connect(url, connect_timeout=2) as conn:
            rows = conn.execute(
                "SELECT run.station, COUNT(device.device) FROM run "
                "LEFT JOIN device ON device.run_id = run.id GROUP BY run.station"
            ).fetchall()
    except (psycopg.OperationalError, psycopg.errors.UndefinedTable):
        return {}  # down, or no station has created the tables yet
    return {str(station): int(n) for station, n in rows}


def start_station(tmp_path: Path, number: int, url: str) -> tuple[subprocess.Popen, Path]:
    folder = tmp_path / f"station-{number}"
    shared = f'results_database: {{url: "{url}", wait_at_end: 40 s}}'
    name = f"FLC-bench-P{number}"
    station = write_station(
        folder, name=name, channels=CHANNELS, seed=2600 + number, clock="real", extra=shared
    )
    recipe = write_recipe(folder, station, lot=f"FK2611-{number:02d}")
    text = recipe.read_text().replace("steps:\n", f"steps:\n{SLOW_SWEEP}\n", 1)
    recipe.write_text(text)
    out = folder / "run"
    env = dict(os.environ, PYTHONPATH=str(ROOT), COLUMNS="120")
    log = open(folder / "screen.txt", "w")  # noqa: SIM115 - closed when the process is reaped
    process = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "sequencer.cli",
            "run",
            str(recipe),
            "--sim",
            "--send-dry-run",
            "--out",
            str(out),
        ],
        cwd=ROOT,
        env=env,
        stdin=subprocess.DEVNULL,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    log.close()
    return process, out


def test_three_stations_one_database_restarted_in_the_middle(tmp_path, pg_server, pg_url):
    stations = [start_station(tmp_path, n, pg_url) for n in (1, 2, 3)]
    names = [f"FLC-bench-P{n}" for n in (1, 2, 3)]
    try:
        until(
            lambda: all(stored_per_station(pg_url).get(n, 0) >= 3 for n in names),
            "every station's first results in the shared database",
        )
        pg_server.stop()
        try:
            at_stop = [journal_lines(out) for _, out in stations]
            until(
                lambda: all(
                    journal_lines(out) >= n + 3
                    for (_, out), n in zip(stations, at_stop, strict=True)
                ),
                "the stations to go on testing while the database is down",
            )
            while_down = [
                journal_lines(out) - n for (_, out), n in zip(stations, at_stop, strict=True)
            ]
        finally:
            pg_server.start()
        codes = [process.wait(timeout=90) for process, _ in stations]
    finally:
        for process, _ in stations:
            if process.poll() is None:
                process.kill()
                process.wait()
    screens = [(out.parent / "screen.txt").read_text() for _, out in stations]
    assert codes == [0, 0, 0], screens
    for screen in screens:
        assert "every result of the run is stored" in screen, screen

    journals = [_journal(out) for _, out in stations]
    with psycopg.connect(pg_url) as conn:
        shared = conn.execute(
            'SELECT run.uid, device."round", device.device, device.seq, COUNT(point.idx) '
            "FROM device JOIN run ON run.id = device.run_id "
            'LEFT JOIN point ON (point.run_id, point."round", point.device) = '
            '(device.run_id, device."round", device.device) '
            'GROUP BY run.uid, device."round", device.device, device.seq'
        ).fetchall()
        runs = conn.execute("SELECT station, status FROM run ORDER BY station").fetchall()
    expected = sorted(key for journal in journals for key in journal)
    assert sorted(shared) == expected  # each result once, with every one of its points
    assert runs == [(name, "completed") for name in names]
    assert all(n >= 3 for n in while_down)
    assert len(expected) == 3 * CHANNELS
    print(f"\nstored {len(expected)} results of 3 stations; tested while down: {while_down}")


def _journal(out: Path) -> list[tuple]:
    uid = json.loads((out / "manifest.json").read_text())["uid"]
    keys = []
    for line in (out / "journal.jsonl").read_text().splitlines():
        entry = json.loads(line)
        points = len(entry["points"]["step"])
        keys.append((uid, entry["round"], entry["device"], entry["seq"], points))
    return keys
