"""200 levels as one instrument-side source list with one binary buffer read, against the same
200 levels point by point, through the runner (sequencer.run.device.measure_device) on the
simulated SMU over TCP with its real clock, so the instrument's time passes as it would.

    python benchmarks/lists.py [--levels N] [--repeats R]

Three cases, each measured both ways in this one run (medians of R repeats):
- `1 ms a point`: each point costs the instrument 1 ms of settling and aperture
  (TRIGger:DELay 0.8 ms + 0.01 NPLC, 0.2 ms at 50 Hz): the target case;
- `shortest aperture`: 0.01 NPLC and no settling, so the exchanges are nearly all there is;
- `1 ms reply latency`: as `1 ms a point`, with every reply 1 ms late (the simulator's
  late-reply fault on every query), as a slower link to an instrument would make it;
- `no instrument time`: as `1 ms a point` on the virtual clock: the exchanges alone.
The list cannot beat the instrument's own time: 200 points of 1 ms take 0.2 s either way, so
the ratio is bounded by (1 ms + the cost of one point's exchanges) / 1 ms. Target: >= 5x at
1 ms a point.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from instruments import connect  # noqa: E402
from sequencer.bench.lotrun import make_guard  # noqa: E402
from sequencer.plan.segments import Plan, Segment  # noqa: E402
from sequencer.recipe.load import load_recipe  # noqa: E402
from sequencer.run.device import measure_device  # noqa: E402
from sequencer.run.recorder import Recorder  # noqa: E402
from sequencer.run.shutdown import start_safe  # noqa: E402

TARGET = 5.0
NPLC = 0.01  # 0.2 ms at 50 Hz: the shortest aperture the simulated SMU takes
CASES = {  # name: (settle s, fault text or None, clock)
    "1 ms a point": (0.8e-3, None, "real"),
    "shortest aperture": (0.0, None, "real"),
    "1 ms reply latency": (0.8e-3, "late-reply:on=READ?|SYST:ERR?|FETC?,delay=1ms,count=0", "real"),
    "no instrument time": (0.8e-3, None, "virtual"),
}


def plan_of(levels: int, settle_s: float, lists: bool) -> Plan:
    volts = tuple(round(20.0 * k / (levels - 1), 9) for k in range(levels))
    return Plan((Segment("sweep", "sweep", volts, 5e-3, settle_s),), (1,), NPLC, 50.0, lists)


def timed(conn, recipe, plan: Plan, repeats: int) -> tuple[float, Recorder]:
    guard = make_guard(recipe, conn.smu)
    seconds, recorder = [], Recorder()
    for _ in range(repeats):
        recorder = Recorder()
        t0 = time.perf_counter()
        measure_device(conn.smu, plan, 1, guard, recorder)
        seconds.append(time.perf_counter() - t0)
    return statistics.median(seconds), recorder


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--levels", type=int, default=200)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    recipe = load_recipe(ROOT / "recipes" / "demo.yaml")
    base = dict(recipe.station.simulator_options)
    print(f"{args.levels} levels through the runner, simulated SMU over TCP; median of "
          f"{args.repeats}\n")  # fmt: skip
    print(f"{'case':<22}{'point by point':>16}{'list + 1 block':>16}{'ratio':>8}"
          f"{'   per point, point by point':>29}")  # fmt: skip
    ratios = {}
    for name, (settle, fault, clock) in CASES.items():
        options = {**base, "clock": clock, **({"faults": [fault]} if fault else {})}
        with connect("sim", sim_options=options, timeout_s=5.0) as conn:
            start_safe(conn.smu)
            plain, a = timed(conn, recipe, plan_of(args.levels, settle, False), args.repeats)
            listed, b = timed(conn, recipe, plan_of(args.levels, settle, True), args.repeats)
        assert len(a.current_a) == len(b.current_a) == args.levels
        ratios[name] = plain / listed
        print(f"{name:<22}{1e3 * plain:>13.1f} ms{1e3 * listed:>13.1f} ms{ratios[name]:>7.1f}x"
              f"{1e3 * plain / args.levels:>23.2f} ms")  # fmt: skip
    ratio = ratios["1 ms a point"]
    print(f"\ntarget >= {TARGET:g}x at 1 ms a point: {ratio:.1f}x, "
          f"{'met' if ratio >= TARGET else 'NOT met'}")  # fmt: skip
    if ratio < TARGET:
        print(
            "(the list removes the exchanges, not the instrument's own 1 ms a point: with "
            "point by point costing p ms a point, no list can be faster than p / 1 ms)"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
