"""A gauge study and a station comparison measured on the simulator, whose station offsets and
repeatability are set as options: the study's estimates must fall within their intervals of
the values that were set."""

from __future__ import annotations

import io

import numpy as np
import pytest
from rich.console import Console

from instruments.dialect import load_dialect
from instruments.loopback import CallableTransport
from instruments.smu import ScpiSmu
from sequencer.bench.lotrun import run_lot
from sequencer.cli.main import main
from sequencer.plan.make import make_plan
from sequencer.store.export import find_runs, load_run, merge_runs
from sequencer.store.runstore import RunStore
from sequencer.study import agreement, grr
from simulator import Session, SimOptions, build_instrument
from tests.store.conftest import load, manifest_of, write_recipe

CONTACT_SPREAD = 0.001  # of the reading, per contact
OFFSETS = {"S1": 0.0, "S2": 0.0004, "S3": -0.0003}  # of the 10 mA range: 0, +4, -3 uA


def measure(recipe, folder, *, station, offset, noise_seed):
    sim = SimOptions(
        seed=2611, devices=len(recipe.station.channels), spread=1.3, clock="virtual",
        contact_spread=CONTACT_SPREAD, range_offset=offset, noise_seed=noise_seed,
    )  # fmt: skip
    smu = ScpiSmu(
        CallableTransport(Session(build_instrument(sim)).handle), load_dialect("scpi1999")
    )
    manifest = {**manifest_of(recipe), "station": station}
    store = RunStore.create(folder, manifest)
    run_lot(recipe, make_plan(recipe), smu, store, lambda done: None)
    store.finish("completed", "t1")


@pytest.fixture(scope="module")
def study_runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("simstudy")
    recipe = load(write_recipe(root / "recipe", channels=8))
    for n, (station, offset) in enumerate(OFFSETS.items()):
        for repeat in range(3):
            folder = root / "runs" / f"{station}-{repeat}"
            measure(recipe, folder, station=station, offset=offset, noise_seed=10 * n + repeat + 1)
    return root / "runs"


def command(*argv) -> str:
    out = io.StringIO()
    code = main([str(a) for a in argv], console=Console(file=out, width=200, highlight=False))
    assert code == 0, out.getvalue()
    return out.getvalue()


@pytest.mark.sim
def test_gauge_study_finds_the_set_repeatability_and_station_offsets(study_runs):
    table = merge_runs(find_runs([], study_runs))
    kept = table[table["regulated_current_A"].notna()]
    records = zip(kept["device"], kept["station"], kept["regulated_current_A"], strict=True)
    readings, parts, stations = grr.readings_table(records)
    assert stations == list(OFFSETS) and readings.shape[1:] == (3, 3)
    study = grr.anova_study(readings)
    bounds = {name: (low, high) for name, low, high in study.intervals}
    ip = readings.mean()
    set_repeatability = CONTACT_SPREAD * ip  # instrument noise adds well under 1 % to this
    set_reproducibility = np.std([o * 10e-3 for o in OFFSETS.values()], ddof=1)
    low, high = bounds["repeatability"]
    assert low <= set_repeatability <= high
    low, high = bounds["reproducibility"]
    assert low <= set_reproducibility <= high
    out = command("study", "grr", "--under", study_runs, "--by", "station")
    assert f"{len(parts)} parts x 3 stations (S1, S2, S3) x 3 repeats" in out


@pytest.mark.sim
def test_station_comparison_finds_the_set_offset(study_runs):
    out = command(
        "study", "compare", study_runs / "S1-0", study_runs / "S2-0", "--tolerance", "2e-6"
    )
    assert "do not agree" in out and "constant offset" in out
    a, b = load_run(study_runs / "S1-0"), load_run(study_runs / "S2-0")
    x = a.set_index("device")["regulated_current_A"].dropna()
    y = b.set_index("device")["regulated_current_A"].dropna()
    result = agreement.compare(x.to_numpy(), y[x.index].to_numpy())
    assert result.bias.contains(4e-6)  # +4 uA was set (0.0004 of the 10 mA range)
