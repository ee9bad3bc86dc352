"""`ccbench results`: runs listed, filtered and merged into one table; CSV and Parquet out."""

from __future__ import annotations

import io
import sqlite3
from dataclasses import replace

import pandas as pd
import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.store.export import Filter, find_runs, merge_runs, parse_since
from sequencer.store.runstore import RunStore
from tests.store.conftest import load, manifest_of, measure_into, write_recipe


def run(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), console=Console(file=out, width=200, highlight=False))
    return code, out.getvalue()


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Three run folders under one root: two lots of one product, one of another."""
    root = tmp_path_factory.mktemp("runs")
    made = {}
    for lot, seed, product in (
        ("FK2611-07", 2611, None),
        ("FK2611-08", 2612, None),
        ("FK2702-01", 2701, "FLC-2.2 current limiter, 2.2 mA nominal"),
    ):
        recipe = load(write_recipe(root / "recipes" / lot, lot=lot, seed=seed, channels=5))
        manifest = manifest_of(recipe)
        if product:
            recipe = replace(recipe, product=product)
            manifest["product"] = product
        store = RunStore.create(root / lot, manifest)
        measure_into(store, recipe)
        store.finish("completed", "t1")
        made[lot] = root / lot
    return root, made


def test_find_and_merge_every_run_under_a_folder(runs):
    root, made = runs
    folders = find_runs([], root)
    assert folders == sorted(made.values())
    table = merge_runs(folders)
    assert len(table) == 15 and table.groupby("lot").size().to_dict() == dict.fromkeys(made, 5)
    for column in ("folder", "run", "lot", "product", "device", "round", "verdict",
                   "regulated_current_A", "identity", "recipe_sha256", "measured"):  # fmt: skip
        assert column in table.columns, column


def test_filters_by_lot_product_verdict_and_date(runs):
    root, _ = runs
    folders = find_runs([], root)
    everything = merge_runs(folders)
    assert set(merge_runs(folders, Filter(lot="fk2611-*"))["lot"]) == {"FK2611-07", "FK2611-08"}
    only = merge_runs(folders, Filter(product="FLC-2.2*"))
    assert set(only["lot"]) == {"FK2702-01"}
    failed = merge_runs(folders, Filter(verdict="fail"))
    assert len(failed) == (everything["verdict"] == "fail").sum() and len(failed) > 0
    assert len(merge_runs(folders, Filter(since=parse_since("2000-01-01")))) == 15
    assert merge_runs(folders, Filter(since=parse_since("2999-01-01"))).empty


def test_results_command_screen_csv_and_parquet(runs, tmp_path):
    root, made = runs
    code, text = run("results", "--under", str(root), "--lot", "FK2611-*", "--csv",
                     str(tmp_path / "out.csv"))  # fmt: skip
    assert code == 0, text
    assert "FK2611-07" in text and "FK2611-08" in text and "FK2702-01" not in text
    assert "10 devices from 2 of 3 runs; written to" in text
    from_csv = pd.read_csv(tmp_path / "out.csv")
    code, text = run("results", str(made["FK2611-07"]), str(made["FK2611-08"]), "--parquet",
                     str(tmp_path / "out.parquet"), "--devices")  # fmt: skip
    assert code == 0, text
    from_parquet = pd.read_parquet(tmp_path / "out.parquet")
    assert list(from_parquet.columns) == list(from_csv.columns)
    assert list(from_parquet["device"]) == list(from_csv["device"])
    ip = "regulated_current_A"
    pd.testing.assert_series_equal(from_parquet[ip], from_csv[ip], check_exact=False, rtol=1e-12)
    assert "Devices" in text and "FK2611-07-001" in text


def test_the_csv_export_holds_what_the_database_holds(runs, tmp_path):
    _, made = runs
    table = merge_runs([made["FK2611-07"]])
    db = sqlite3.connect(made["FK2611-07"] / "results.sqlite")
    stored = db.execute("SELECT device, verdict, regulated_current_A FROM device ORDER BY seq")
    rows = stored.fetchall()
    db.close()
    assert list(zip(table["device"], table["verdict"], strict=True)) == [r[:2] for r in rows]
    assert table["regulated_current_A"].tolist() == pytest.approx(
        [r[2] if r[2] is not None else float("nan") for r in rows], nan_ok=True
    )


@pytest.mark.robustness
def test_results_refuses_what_is_not_a_run_folder(tmp_path):
    code, text = run("results", str(tmp_path))
    assert code == 5 and "not a run folder (no results.sqlite)" in text
    code, text = run("results")
    assert code == 2 and "name run folders or give --under DIR" in text
    code, text = run("results", "--under", str(tmp_path), "--since", "last tuesday")
    assert code == 2 and "--since must be a date like 2026-05-01" in text
