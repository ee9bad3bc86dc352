"""Devices per hour with four SMUs at once against one, real-time clock: each simulated SMU is
its own process (`python -m simulator serve`) whose settling and apertures really pass.

    python benchmarks/parallel.py [--devices N]

One instrument: `run_lot` over the tray, as `ccbench run` does on a one-SMU station. Four:
`run_parallel` with the tray split in four (sequencer.bench.parallel: a worker thread per SMU, the
calling thread judging and storing in device order). Both store every device in a real run
folder (journal fsynced, SQLite, CSV) and log every SCPI exchange. Each SMU serves the same
simulated lot, so both runs measure the same devices; connecting and the safe start are not
timed. Measured for the production plan and the full sweep (recipes/demo-production.yaml,
recipes/demo.yaml with lists). Target: at least 3.5x the devices per hour with four.
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import tempfile
import time
from contextlib import ExitStack
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from instruments import connect  # noqa: E402
from sequencer.bench.lotrun import make_guard, run_lot  # noqa: E402
from sequencer.bench.parallel import Lane, lane_guards, run_parallel  # noqa: E402
from sequencer.plan.make import make_plan  # noqa: E402
from sequencer.recipe.load import load_recipe  # noqa: E402
from sequencer.run.shutdown import make_safe, start_safe  # noqa: E402
from sequencer.store.runstore import RunStore  # noqa: E402

TARGET = 3.5
MANIFEST = {"started": "2026-05-04T22:00:00.000+00:00", "lot": "FK2611-07"}


def timed_run(recipe, devices: int, instruments: int, folder: Path) -> float:
    """Seconds to measure, judge and store `devices` on `instruments` SMUs."""
    options = {**recipe.station.simulator_options, "clock": "real", "devices": devices}
    plan = dataclasses.replace(make_plan(recipe), channels=tuple(range(1, devices + 1)))
    store = RunStore.create(folder, MANIFEST)
    with ExitStack() as stack:
        conns = []
        for k in range(instruments):
            log = stack.enter_context(open(folder / f"scpi-{k}.log", "a", encoding="utf-8"))
            conns.append(stack.enter_context(connect("sim", sim_options=options, spy_log=log)))
        guards = [make_guard(recipe, conn.smu) for conn in conns]
        for conn in conns:
            start_safe(conn.smu)
        t0 = time.perf_counter()
        if instruments == 1:
            run_lot(recipe, plan, conns[0].smu, store, lambda done: None, guard=guards[0])
        else:
            guards = lane_guards(guards)
            share = -(-devices // instruments)
            lanes = [
                Lane(f"smu{k}", conn.smu, guards[k], plan.channels[k * share : (k + 1) * share])
                for k, conn in enumerate(conns)
            ]
            run_parallel(recipe, plan, lanes, store, lambda done: None)
        seconds = time.perf_counter() - t0
        for conn, guard in zip(conns, guards, strict=True):
            make_safe(conn, guard.level_v)
    store.finish("completed", "2026-05-04T22:10:00.000+00:00")
    return seconds


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", type=int, default=40)
    args = parser.parse_args()
    production = load_recipe(ROOT / "recipes" / "demo-production.yaml")
    full = dataclasses.replace(load_recipe(ROOT / "recipes" / "demo.yaml"), lists=True)
    print(f"{args.devices} devices, simulated SMUs with real clocks, each its own process\n")
    print(f"{'plan':<18}{'1 SMU':>10}{'4 SMUs':>10}{'devices/h, 1':>15}{'devices/h, 4':>15}"
          f"{'ratio':>8}")  # fmt: skip
    met = True
    with tempfile.TemporaryDirectory(prefix="parallel-") as tmp:
        for label, recipe in (("production plan", production), ("full sweep", full)):
            one = timed_run(recipe, args.devices, 1, Path(tmp) / f"{label}-1")
            four = timed_run(recipe, args.devices, 4, Path(tmp) / f"{label}-4")
            ratio = one / four
            met &= ratio >= TARGET
            print(f"{label:<18}{one:>8.2f} s{four:>8.2f} s{3600 * args.devices / one:>15,.0f}"
                  f"{3600 * args.devices / four:>15,.0f}{ratio:>7.2f}x")  # fmt: skip
    print(f"\ntarget: four SMUs >= {TARGET:g}x the devices per hour of one: "
          f"{'met' if met else 'NOT met'} for both plans" if met else
          f"\ntarget: four SMUs >= {TARGET:g}x the devices per hour of one: NOT met for every "
          f"plan (see the ratios)")  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())
