"""Run folders for the store tests: a small recipe on a quick simulated station, an in-process
simulated SMU (the same SCPI text the wire would carry), and a way to run a lot into a store."""

from __future__ import annotations

import sqlite3
from collections.abc import Callable
from pathlib import Path

import pytest

from instruments.dialect import load_dialect
from instruments.loopback import CallableTransport
from instruments.smu import ScpiSmu
from sequencer.bench.lotrun import RunSummary, run_lot
from sequencer.plan.make import make_plan
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe, load_recipe
from sequencer.store.runstore import RunStore
from simulator.options import SimOptions, build_instrument
from simulator.session import Session

STATION = """\
station: FLC-bench-T1
instrument: {{resource: sim, timeout: 5 s}}
tray: {{channels: 1-{channels}}}
limits: {{max_voltage: 60 V, max_current: 20 mA, max_power: 250 mW}}
fixture: {{interlocked: true}}
simulator: {{seed: {seed}, preset: FLC-1.8, spread: 1.3, defect_rate: 0.1, clock: virtual}}
"""

RECIPE = """\
product: FLC-1.8 current limiter, 1.8 mA nominal
lot: {lot}
station: station.yaml
nplc: 0.1
steps:
  - sweep: {{name: iv, start: 0 V, stop: 40 V, points: {points}, compliance: 5 mA}}
  - spot: {{name: at-test-voltage, voltage: 25 V, compliance: 5 mA, repeats: 3}}
judge:
  test_voltage: 25 V
  knee_voltage: 6 V
  slope_window: 4 V
  limits:
    regulated_current: {{min: 1.62 mA, max: 1.98 mA}}
    dynamic_impedance: {{min: 100 kohm}}
{extra}"""


def write_recipe(
    folder: Path,
    *,
    lot: str = "FK2611-07",
    channels: int = 6,
    points: int = 41,
    seed: int = 2611,
    extra: str = "",
) -> Path:
    """A recipe and its station in `folder`; returns the recipe's path."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "station.yaml").write_text(STATION.format(channels=channels, seed=seed))
    path = folder / "recipe.yaml"
    path.write_text(RECIPE.format(lot=lot, points=points, extra=extra))
    return path


@pytest.fixture
def recipe_file(tmp_path: Path) -> Path:
    return write_recipe(tmp_path / "recipes")


def sim_smu(recipe: Recipe) -> ScpiSmu:
    """The station's simulated SMU in this process, on a fresh instrument (as a restart)."""
    options = recipe.station.simulator_options
    sim = SimOptions(
        seed=int(options["seed"]),
        devices=len(recipe.station.channels),
        spread=float(options["spread"]),
        defect_rate=float(options["defect_rate"]),
        clock="virtual",
    )
    session = Session(build_instrument(sim))
    return ScpiSmu(CallableTransport(session.handle), load_dialect("scpi1999"))


def manifest_of(recipe: Recipe) -> dict[str, object]:
    return {
        "started": "2026-05-04T22:00:00.000+00:00",
        "product": recipe.product,
        "lot": recipe.lot,
        "recipe_sha256": recipe.digest,
        "recipe_text": recipe.text,
        "station_text": recipe.station.text,
    }


def measure_into(
    store: RunStore,
    recipe: Recipe,
    plan: Plan | None = None,
    on_device: Callable = lambda done: None,
) -> RunSummary:
    """One pass of `plan` (all channels by default) on a fresh simulated SMU."""
    plan = plan or make_plan(recipe)
    return run_lot(recipe, plan, sim_smu(recipe), store, on_device)


def load(path: Path) -> Recipe:
    return load_recipe(path)


# What differs between a resumed and an uninterrupted run by design: when and in which session.
SKIP = ("measured", "session", "seq", "round_started")


def stored(out: Path) -> tuple[list[dict], list[tuple]]:
    """Every device row (less SKIP) and every raw point of a run folder, in a stable order."""
    db = sqlite3.connect(out / "results.sqlite")
    db.row_factory = sqlite3.Row
    rows = [dict(r) for r in db.execute("SELECT * FROM device ORDER BY round, device")]
    points = db.execute(
        "SELECT round, device, idx, step, level_V, voltage_V, current_A, in_compliance "
        "FROM point ORDER BY round, device, idx"
    ).fetchall()
    db.close()
    return [{k: v for k, v in r.items() if k not in SKIP} for r in rows], [tuple(p) for p in points]
