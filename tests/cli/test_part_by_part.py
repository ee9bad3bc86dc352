"""`ccbench run --part-by-part` as an operator meets it: serials piped in as a scanner types
them, the simulated lid, the verdicts on screen; then `ccbench results --by` on both stores."""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from rich.console import Console

from sequencer.cli.main import main
from tests.support.stations import write_recipe, write_station

ROOT = Path(__file__).resolve().parents[2]
COUNTS = ["3", "4", "2", "1", "0", "0", "1", "66.7%", "66.7%"]
SCRIPT = "FK2611-07-0001\nFK2611-07-0002\nFK2611-07-0001\nFK2611-07-0002\nFK2611-07-0003\nquit\n"


def ccbench(*args: str) -> tuple[int, str]:
    out = io.StringIO()
    console = Console(file=out, width=160, color_system=None, highlight=False)
    code = main(list(args), console)
    return code, out.getvalue()


def run_parts(recipe: Path, out: Path, script: str, *flags: str) -> subprocess.CompletedProcess:
    command = [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim", *flags]
    command += ["--out", str(out), "--part-by-part", "--operator", "ann"]
    env = dict(os.environ, PYTHONPATH=str(ROOT), COLUMNS="100")
    return subprocess.run(
        command, input=script, capture_output=True, text=True, timeout=120, cwd=ROOT, env=env
    )


def operator_session(tmp_path: Path, extra: str = "", *flags: str) -> tuple[Path, str]:
    """The scripted session on a six-socket simulated station whose second part is open."""
    station = write_station(tmp_path / "recipes", channels=6, extra=extra)
    fault = "clock: virtual, faults: [{kind: device-open, on: point, channel: 2}]}"
    station.write_text(station.read_text().replace("clock: virtual}", fault))
    recipe = write_recipe(tmp_path / "recipes", station, extra="part_by_part: {retests: 1}")
    out = tmp_path / "run"
    done = run_parts(recipe, out, SCRIPT, *flags)
    assert done.returncode == 0, done.stdout + done.stderr
    return out, done.stdout


def yield_row(text: str, name: str) -> list[str]:
    """The row of `name` in the yield table (which follows the runs table)."""
    table = text[text.index("Yield per") :]
    return next(line.split() for line in table.splitlines() if line.strip().startswith(name))


@pytest.mark.sim
def test_an_operator_session_through_the_command_line_and_both_stores(tmp_path):
    out, screen = operator_session(tmp_path)
    assert screen.count("lid closed: testing") == 4
    assert "not tested: FK2611-07-0001: duplicate: passed already (attempt 1, pass)" in screen
    assert "FK2611-07-0002: retest 1 of 1" in screen
    assert "█" * 5 in screen and "FK2611-07-0002   attempt 2   bin 3" in screen
    assert "quit between parts: output off; 4 tests stored" in screen
    assert screen.rstrip().splitlines()[-1].startswith("output off (read back from the instrument)")
    code, text = ccbench("results", str(out), "--by", "lot")
    assert code == 0
    # lot, parts, tests, pass, fail, guard-band, aborted, retested, first-test yield, yield
    assert yield_row(text, "FK2611-07") == ["FK2611-07", *COUNTS]


@pytest.mark.sim
def test_the_shared_database_answers_as_the_run_folder_does(tmp_path, pg_url):
    shared = f'results_database: "{pg_url}"'
    out, screen = operator_session(tmp_path, shared, "--send-dry-run")
    assert "every result of the run is stored (4 sent by this session)" in screen
    for by, name in (("lot", "FK2611-07"), ("station", "FLC-bench-P1")):
        code, text = ccbench("results", "--database", pg_url, "--dry-runs", "--by", by)
        assert code == 0 and yield_row(text, name) == [name, *COUNTS], text
        code, local = ccbench("results", str(out), "--by", by)
        assert yield_row(local, name) == yield_row(text, name)
    code, text = ccbench("results", "--database", pg_url, "--dry-runs", "--by", "day",
                         "--verdict", "fail")  # fmt: skip
    assert code == 0 and "2 devices from 1 runs in the shared database" in text
    code, text = ccbench("upload", str(out), "--send-dry-run")  # sent already: nothing left
    assert code == 0 and "(0 sent by this session)" in text


@pytest.mark.sim
def test_a_dry_run_stays_out_of_the_shared_database(tmp_path, pg_url):
    out, screen = operator_session(tmp_path, f'results_database: "{pg_url}"')
    assert "a dry run (simulated instrument): results are not sent" in screen
    assert json.loads((out / "manifest.json").read_text())["dry_run"] is True
    code, text = ccbench("upload", str(out))
    assert code == 0 and "a dry run (simulated instrument); skipped" in text
    code, text = ccbench("results", "--database", pg_url, "--dry-runs")
    assert code == 0 and "0 devices" in text, text  # nothing was sent
    code, text = ccbench("upload", str(out), "--send-dry-run")
    assert code == 0 and "(4 sent by this session)" in text
    code, text = ccbench("results", "--database", pg_url)  # sent, and still left out of yields
    assert code == 0 and "0 devices" in text, text
    code, text = ccbench("results", "--database", pg_url, "--dry-runs")
    assert code == 0 and "4 devices from 1 runs in the shared database" in text, text


def test_part_by_part_refuses_a_schedule(tmp_path):
    station = write_station(tmp_path / "recipes")
    recipe = write_recipe(tmp_path / "recipes", station)
    code, text = ccbench("run", str(recipe), "--sim", "--part-by-part", "--rounds", "2")
    assert code == 2 and "--part-by-part cannot be used with --every/--for/--rounds" in text
