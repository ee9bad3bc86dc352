"""Timing fidelity: a dry run on the real clock takes at least as long as the modelled
instrument works; on the virtual clock the same run reports the same instrument time.

Only bounds that no load on the machine can break are asserted here (a real clock cannot
finish before the instrument time it sleeps through); how close the real run comes to that
time, and how fast the virtual one is, are speed figures: `benchmarks/sim_clock.py` prints
them as ratios measured in one run.

Both runs go the production way: the embedded simulator as its own program, the driver over
pyvisa-py, `run_lot` measuring a small plan. The instrument time is SIMulation:BUSY? (settling,
apertures and 50 us per message unit), read before and after the run.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from instruments import connect
from sequencer.bench.lotrun import run_lot
from sequencer.plan.make import make_plan
from sequencer.recipe.load import load_recipe
from sequencer.store.runstore import RunStore

pytestmark = pytest.mark.sim

STATION = """station: timing-bench
instrument: {{resource: sim, timeout: 2 s}}
tray: {{channels: 2}}
limits: {{max_voltage: 30 V, max_current: 10 mA, max_power: 300 mW}}
simulator: {{clock: {clock}, seed: 3}}
"""
RECIPE = """product: timing check
lot: FK-TIME
station: station.yaml
nplc: 1
steps:
  - sweep: {name: iv, start: 0 V, stop: 20 V, points: 21, compliance: 5 mA, settle: 10 ms}
"""


def timed_run(folder: Path, clock: str) -> tuple[float, float]:
    """(wall-clock seconds of the run, instrument-busy seconds during it)."""
    folder.mkdir()
    (folder / "station.yaml").write_text(STATION.format(clock=clock))
    (folder / "recipe.yaml").write_text(RECIPE)
    recipe = load_recipe(folder / "recipe.yaml")
    store = RunStore.create(folder / "run", {"started": "t0", "lot": recipe.lot})
    options = recipe.station.simulator_options
    with connect("sim", timeout_s=2.0, sim_options=options) as conn:
        busy_before = float(conn.smu.transport.query("SIM:BUSY?"))
        start = time.perf_counter()
        summary = run_lot(recipe, make_plan(recipe), conn.smu, store, lambda done: None)
        wall = time.perf_counter() - start
        busy = float(conn.smu.transport.query("SIM:BUSY?")) - busy_before
    store.finish(summary.status, "t1")
    assert summary.status == "completed"
    return wall, busy


def test_real_time_run_lasts_the_instrument_time_and_virtual_reports_the_same(tmp_path: Path):
    real_wall, real_busy = timed_run(tmp_path / "real", "real")
    _, virtual_busy = timed_run(tmp_path / "virtual", "virtual")
    # 2 devices x 21 points x (10 ms settling + 20 ms aperture at 1 NPLC, 50 Hz) = 1.26 s,
    # plus 50 us per message unit [computed from the wire contract's timing model]
    assert 1.26 < real_busy < 1.26 * 1.05
    assert virtual_busy == pytest.approx(real_busy, rel=1e-9)  # the same work, to the bit
    assert real_wall >= real_busy  # the real clock sleeps through the instrument's time
