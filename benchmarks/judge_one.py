"""What judging one device costs: `judge_curve` on one production-plan curve
(recipes/demo-production.yaml, about 10 readings) and on one full-sweep curve
(recipes/demo.yaml, 86 readings), as the sequencer calls it right after measuring; and the
batch rate of the same engine on a big lot (benchmarks/judge_lot.py's 100,000 curves).

    python benchmarks/judge_one.py [--devices N] [--repeat R] [--lot N]

The curves come from a simulated lot measured in process on the virtual clock (the same
driver and runner as a run, as in benchmarks/production_plan.py). Each curve is judged
`repeat` times; the figures printed are the median and the best over rounds of the mean CPU
time a device (this thread's: on a shared machine wall time also counts the time other
processes had the core; the best round is the one least disturbed by them). The lot is
judged on every core, so its figure is wall time, the best of 3. Not a timed test: run it by
hand. The figures before a change come from running this file against the older code.
"""

from __future__ import annotations

import argparse
import dataclasses
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

import judge_lot  # noqa: E402
from production_plan import Bench  # noqa: E402

from sequencer.bench.lotrun import device_name, make_guard  # noqa: E402
from sequencer.judge.engine import judge_arrays, judge_curve  # noqa: E402
from sequencer.judge.figures import Layout  # noqa: E402
from sequencer.model.curve import Curve  # noqa: E402
from sequencer.plan.make import make_plan  # noqa: E402
from sequencer.recipe.load import Recipe, load_recipe  # noqa: E402
from sequencer.run.device import measure_device  # noqa: E402
from sequencer.run.recorder import Recorder  # noqa: E402

TARGET_MS = 1.0  # production curve


def curves(recipe: Recipe, devices: int, seed: int) -> list[Curve]:
    bench = Bench(recipe, devices, seed)
    plan = dataclasses.replace(make_plan(recipe), channels=bench.channels)
    guard = make_guard(recipe, bench.smu)
    out = []
    for channel in bench.channels:
        recorder = Recorder()
        measure_device(bench.smu, plan, channel, guard, recorder)
        out.append(recorder.curve(device_name(recipe.lot, channel), channel, plan))
    return out


def per_device_ms(lot: list[Curve], recipe: Recipe, repeat: int) -> tuple[float, float]:
    """(median, best) over rounds of the CPU milliseconds a device."""
    settings = recipe.judge
    for c in lot:  # warm up: imports, caches
        judge_curve(c, settings)
    rounds = []
    for _ in range(repeat):
        t0 = time.thread_time()
        for c in lot:
            judge_curve(c, settings)
        rounds.append((time.thread_time() - t0) / len(lot))
    return 1e3 * statistics.median(rounds), 1e3 * min(rounds)


def lot_rate(devices: int) -> float:
    """µs a curve for judge_lot.py's lot judged as arrays (best of 3)."""
    s = judge_lot.settings()
    voltage, current, clamped = judge_lot.lot(devices)
    layout = Layout(("sweep",), judge_lot.np.zeros(judge_lot.POINTS, int), voltage[0].copy())
    layout.level_v[:] = judge_lot.np.linspace(0.0, 40.0, judge_lot.POINTS)
    best = float("inf")
    for _ in range(3):
        t0 = time.perf_counter()
        judge_arrays(layout, voltage, current, clamped, s)
        best = min(best, time.perf_counter() - t0)
    return 1e6 * best / devices


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--devices", type=int, default=50, help="simulated devices a recipe")
    parser.add_argument("--repeat", type=int, default=20, help="rounds over those devices")
    parser.add_argument("--lot", type=int, default=100_000, help="curves in the batch (0: skip)")
    parser.add_argument("--seed", type=int, default=2611)
    args = parser.parse_args()
    results = {}
    for label, name in (("production", "demo-production.yaml"), ("full sweep", "demo.yaml")):
        recipe = load_recipe(ROOT / "recipes" / name)
        lot = curves(recipe, args.devices, args.seed)
        points = statistics.mean(len(c) for c in lot)
        median, best = per_device_ms(lot, recipe, args.repeat)
        results[label] = median
        print(
            f"judge_curve, {label} curve ({points:.1f} readings), {args.devices} devices x "
            f"{args.repeat}: {median:.3f} ms CPU a device (best round {best:.3f} ms)"
        )
    if args.lot:
        rate = lot_rate(args.lot)
        print(
            f"judge_arrays, {args.lot} curves x {judge_lot.POINTS} points: {rate:.2f} µs a curve "
            f"({args.lot * rate / 1e6:.2f} s the lot)"
        )
    met = results["production"] < TARGET_MS
    print(f"target: production curve under {TARGET_MS:g} ms -> {'met' if met else 'NOT met'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
