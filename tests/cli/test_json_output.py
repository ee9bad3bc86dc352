"""`--json` on check, results and report, as a script runs them: a real process whose stdout
is one JSON document (or nothing), its errors on stderr only, the README's exit codes."""

from __future__ import annotations

import csv
import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.plan.make import make_plan
from sequencer.recipe.load import load_recipe

ROOT = Path(__file__).resolve().parents[2]


def ccbench(*args: str, cwd: Path = ROOT) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=cwd, capture_output=True, text=True, timeout=120,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "80", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def document(done: subprocess.CompletedProcess[str], command: str) -> dict:
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stderr == ""
    assert done.stdout.count("\n") == 1  # one document, one line
    doc = json.loads(done.stdout)  # strict: NaN or Infinity would not parse as JSON values here
    assert doc["format"] == f"ccbench-{command}/1"
    return doc


def _no_nan(value: object) -> None:
    if isinstance(value, dict):
        for v in value.values():
            _no_nan(v)
    elif isinstance(value, list):
        for v in value:
            _no_nan(v)
    elif isinstance(value, float):
        assert math.isfinite(value)


def small_bench(folder: Path, channels: str = "1-4") -> Path:
    station = (ROOT / "recipes/demo-station.yaml").read_text()
    assert "channels: 1-20" in station
    (folder / "demo-station.yaml").write_text(
        station.replace("channels: 1-20", f"channels: {channels}")
    )
    (folder / "demo.yaml").write_text((ROOT / "recipes/demo.yaml").read_text())
    return folder / "demo.yaml"


@pytest.fixture(scope="module")
def stored_run(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("json")
    recipe = small_bench(folder)
    done = ccbench("run", str(recipe), "--sim", "--out", str(folder / "run"))
    assert done.returncode == 0, done.stdout + done.stderr
    return folder / "run"


def test_check_json_is_the_plan_the_planner_makes():
    doc = document(ccbench("check", "recipes/demo.yaml", "--json"), "check")
    plan = make_plan(load_recipe(ROOT / "recipes/demo.yaml"))
    assert doc["valid"] is True
    assert doc["plan"]["devices"] == len(plan.channels)
    assert doc["plan"]["points_per_device"] == plan.points_per_device
    assert doc["plan"]["peak_voltage_V"] == plan.peak_voltage_v
    assert [s["step"] for s in doc["plan"]["steps"]] == [s.step for s in plan.segments]
    assert {x["quantity"] for x in doc["limits"]} >= {"voltage", "compliance", "V x compliance"}
    assert doc["estimate"]["run_s"] > 0
    _no_nan(doc)


@pytest.mark.robustness
def test_check_json_error_is_on_stderr_only_with_exit_2(tmp_path):
    recipe = small_bench(tmp_path)
    recipe.write_text(recipe.read_text().replace("compliance: 5 mA", "compliance: 5", 1))
    done = ccbench("check", str(recipe), "--json")
    assert done.returncode == 2
    assert done.stdout == ""
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"ccbench: {recipe}:"), done.stderr
    assert "needs a unit" in lines[0]


@pytest.mark.robustness
def test_a_safety_refusal_under_json_is_exit_3_on_stderr(tmp_path):
    recipe = small_bench(tmp_path)
    recipe.write_text(recipe.read_text().replace("stop: 40 V", "stop: 75 V"))
    done = ccbench("check", str(recipe), "--json")
    assert done.returncode == 3 and done.stdout == ""
    assert "above the station's maximum 60 V" in done.stderr


@pytest.mark.robustness
def test_errors_go_to_stderr_whenever_stdout_is_not_a_terminal(tmp_path):
    recipe = small_bench(tmp_path)
    recipe.write_text(recipe.read_text().replace("compliance: 5 mA", "compliance: 5", 1))
    done = ccbench("check", str(recipe))  # no --json; stdout is a pipe
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr.startswith(f"ccbench: {recipe}:")


def test_results_json_holds_every_stored_device(stored_run):
    doc = document(ccbench("results", str(stored_run), "--json", "--devices", "--by", "lot"),
                   "results")  # fmt: skip
    with open(stored_run / "devices.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [d["device"] for d in doc["devices"]] == [r["device"] for r in rows]
    assert [d["verdict"] for d in doc["devices"]] == [r["verdict"] for r in rows]
    for d, r in zip(doc["devices"], rows, strict=True):
        assert d["regulated_current_A"] == pytest.approx(float(r["regulated_current_A"]))
    [run] = doc["runs"]
    assert run["devices"] == len(rows)
    assert run["verdicts"]["pass"] == sum(r["verdict"] == "pass" for r in rows)
    assert run["rounds"] == 1 and {d["round"] for d in doc["devices"]} == {1}
    [group] = doc["yield_by"]["rows"]
    good = sum(r["bin_class"] == "pass" for r in rows)
    assert group["yield"] == pytest.approx(good / len(rows))
    _no_nan(doc)


@pytest.mark.robustness
def test_results_json_on_a_folder_without_a_run_is_exit_2_on_stderr(tmp_path):
    (tmp_path / "empty").mkdir()
    (tmp_path / "empty" / "results.sqlite").write_bytes(b"")
    done = ccbench("results", str(tmp_path / "empty"), "--json")
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr.startswith("ccbench: "), done.stderr


def test_report_json_says_what_the_text_summary_says(stored_run):
    doc = document(ccbench("report", str(stored_run), "--text", "--json"), "report")
    with open(stored_run / "devices.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    [whole] = doc["yields"]
    assert whole["parts"] == len(rows)
    assert whole["in_pass_bins"] == sum(r["bin_class"] == "pass" for r in rows)
    assert sum(b["parts"] for b in doc["bins"]) == len(rows)
    assert doc["dry_run"] is True and doc["notes"][0].startswith("DRY RUN")
    figures = {s["figure"] for s in doc["closest_to_limits"]}
    assert "regulated_current" in figures
    assert all(s["unit"] for s in doc["capability"])
    assert not (stored_run / "report").exists()  # --json writes no HTML
    text = ccbench("report", str(stored_run), "--text").stdout
    for s in doc["closest_to_limits"]:
        assert s["worst_device"] in text  # the same worst devices as the terminal table
    _no_nan(doc)


@pytest.mark.robustness
def test_report_json_for_an_unknown_device_is_exit_2_on_stderr(stored_run):
    done = ccbench("report", str(stored_run), "--json", "--device", "no-such-part")
    assert done.returncode == 2 and done.stdout == ""
    assert "no device 'no-such-part'" in done.stderr


@pytest.mark.sim
def test_results_json_from_the_shared_database_says_what_the_folder_says(tmp_path, pg_url):
    from tests.support.stations import write_recipe, write_station

    station = write_station(tmp_path / "recipes", channels=3, extra=f'results_database: "{pg_url}"')
    recipe = write_recipe(tmp_path / "recipes", station)
    out = tmp_path / "run"
    lot = "FK2611-JSON"  # the session's database is shared with other tests: a lot of its own
    done = ccbench("run", str(recipe), "--sim", "--out", str(out), "--send-dry-run", "--lot", lot)
    assert done.returncode == 0, done.stdout + done.stderr
    folder = document(ccbench("results", str(out), "--json", "--by", "lot", "--devices"), "results")
    shared = document(
        ccbench("results", "--database", pg_url, "--dry-runs", "--json", "--by", "lot",
                "--devices", "--lot", lot),
        "results",
    )  # fmt: skip
    assert shared["source"] == "database" and folder["source"] == "folders"
    assert shared["yield_by"]["rows"] == folder["yield_by"]["rows"]
    assert [(d["device"], d["verdict"], d["round"]) for d in shared["devices"]] == [
        (d["device"], d["verdict"], d["round"]) for d in folder["devices"]
    ]
