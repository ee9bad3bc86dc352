"""`ccbench study grr`, `ccbench study compare` and `ccbench results --spc` on stored run
folders: one lot measured on the simulator, copied as runs of several operators with station
offsets and repeat noise set in the stored readings, so the answer can be checked against what
was set and against the study functions on the same numbers."""

from __future__ import annotations

import io
import json
import re
import shutil
import sqlite3
import uuid

import numpy as np
import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.store.crosscheck import RECORD_KEY, records
from sequencer.store.runstore import RunStore
from sequencer.study import grr
from tests.store.conftest import load, manifest_of, measure_into, write_recipe

OFFSETS = {"ann": 0.0, "ben": 4e-6, "cal": -3e-6}  # A, per operator
REPEAT_SD = 2e-6  # A


def run(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main([str(a) for a in argv], console=Console(file=out, width=200, highlight=False))
    return code, out.getvalue()


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    root = tmp_path_factory.mktemp("study")
    recipe = load(write_recipe(root / "recipe", channels=6))
    store = RunStore.create(root / "measured", manifest_of(recipe))
    measure_into(store, recipe)
    store.finish("completed", "t1")
    return root / "measured"


def copy_as(measured, target, operator, shift, noise_sd, seed):
    """A copy of the measured run as if `operator` had measured it: readings shifted and
    noised; returns the stored (device, reading) pairs."""
    shutil.copytree(measured, target)
    db = sqlite3.connect(target / "results.sqlite")
    db.execute("UPDATE run SET operator = ?, uid = ?", (operator, uuid.uuid4().hex))
    rows = db.execute("SELECT rowid, device, regulated_current_A FROM device").fetchall()
    rng = np.random.default_rng(seed)
    out = []
    for rowid, device, value in rows:
        if value is None:
            continue
        new = value + shift + rng.normal(0, noise_sd)
        db.execute("UPDATE device SET regulated_current_A = ? WHERE rowid = ?", (new, rowid))
        out.append((device, operator, new))
    db.commit()
    # As if measured so: the end-of-run record matches the edited readings (else every reader
    # refuses the copy as a changed run, as it should).
    manifest = json.loads((target / "manifest.json").read_text())
    manifest[RECORD_KEY] = records(target, db)
    (target / "manifest.json").write_text(json.dumps(manifest))
    db.close()
    return out


@pytest.fixture(scope="module")
def study(measured, tmp_path_factory):
    root = tmp_path_factory.mktemp("grr")
    records = []
    for n, (who, shift) in enumerate(OFFSETS.items()):
        for repeat in range(3):
            records += copy_as(
                measured, root / f"{who}-{repeat}", who, shift, REPEAT_SD, 10 * n + repeat
            )
    return root, records


def test_grr_command_prints_the_study_of_the_stored_readings(study):
    root, records = study
    code, out = run("study", "grr", "--under", root, "--figure", "IP", "--tolerance", "0.36e-3")
    assert code == 0, out
    table, parts, _ = grr.readings_table(records)
    expected = grr.anova_study(table, tolerance=0.36e-3)
    assert f"{len(parts)} parts x 3 operators (ann, ben, cal) x 3 repeats" in out
    assert f"{expected.pct_grr_of_total:.1f}%" in out
    assert f"{expected.pct_grr_of_tolerance:.1f}%" in out
    assert "average and range" in out and "ANOVA" in out
    assert f"verdict (ANOVA): {expected.verdict}" in out


def test_grr_finds_the_repeatability_and_offsets_that_were_set(study):
    _, records = study
    table, _, _ = grr.readings_table(records)
    result = grr.anova_study(table)
    # 6 parts x 3 x 3: a loose check; the unit tests check the sums against statsmodels.
    assert result.repeatability == pytest.approx(REPEAT_SD, rel=0.35)
    set_sd = np.std(list(OFFSETS.values()), ddof=1)
    assert 0.2 * set_sd < result.reproducibility < 3 * set_sd


def test_unbalanced_study_is_refused_naming_the_short_cell(study, tmp_path):
    root, _ = study
    for folder in root.iterdir():
        if folder.name != "ben-2":
            shutil.copytree(folder, tmp_path / folder.name)
    code, out = run("study", "grr", "--under", tmp_path)
    assert code == 2
    assert "unbalanced study" in out and "has 2" in out and "ben" in out
    assert len(out.strip().splitlines()) == 1


def test_runs_without_an_operator_are_refused(measured, tmp_path):
    shutil.copytree(measured, tmp_path / "a")
    code, out = run("study", "grr", tmp_path / "a")
    assert code == 2 and "no operator recorded" in out and "--operator" in out


def test_compare_finds_the_station_offset(measured, tmp_path):
    copy_as(measured, tmp_path / "ref", "ann", 0.0, 0.5e-6, 1)
    copy_as(measured, tmp_path / "other", "ann", 10e-6, 0.5e-6, 2)
    code, out = run("study", "compare", tmp_path / "ref", tmp_path / "other", "--tolerance", "5e-6")
    assert code == 0, out
    assert "do not agree within +/-5 µA" in out and "constant offset" in out
    code, out = run(
        "study", "compare", tmp_path / "ref", tmp_path / "other", "--tolerance", "20e-6"
    )
    assert "the stations agree within +/-20 µA" in out


def test_spc_summary_flags_a_shift_after_the_baseline(measured, tmp_path):
    # One part read again and again: 20 quiet readings, then a shift of 5 sigma.
    folders = []
    for n in range(30):
        shift = 10e-6 if n >= 20 else 0.0
        copy_as(measured, tmp_path / f"r{n:02d}", "ann", shift, 2e-6, n)
        folders.append(tmp_path / f"r{n:02d}")
    code, out = run("results", *folders, "--spc", "IP", "--baseline", "20")
    assert code == 0, out
    assert "limits from the first 20" in out
    flagged = [int(n) for n in re.findall(r"alarm at reading (\d+)", out)]
    assert flagged and min(flagged) > 20  # quiet in the baseline, flagged after the shift


def test_spc_refuses_an_unknown_figure(measured):
    code, out = run("results", measured, "--spc", "XX")
    assert code == 2 and "--spc" in out and "not a stored figure" in out
