"""The simulator's own computing per device: CPU time spent inside the simulated SMU's message
handler while the real driver and runner measure a lot, for the production plan
(recipes/demo-production.yaml), the full 81-point sweep as instrument-side lists
(recipes/demo.yaml with `lists: true`) and the full sweep point by point (recipes/demo.yaml).

    python benchmarks/simulator_cpu.py [--devices N] [--repeats R] [--baseline GIT_REF]

The simulator runs in process (simulator.session.Session behind
instruments.loopback.CallableTransport, virtual clock, the demo station's lot), so nothing
sleeps and the time inside `Session.handle` is the simulator's CPU: parsing, the device
solves, noise and formatting; the driver, runner and judge are outside it. Over TCP the server
adds its socket reads and writes to this. Each measurement runs R times in fresh child
processes (baseline and this tree taking turns) and the least of each case is kept: other work
on the machine can only add to a figure.

With `--baseline REF` the simulator package of that git commit (e.g. `main`) is extracted
into a temporary folder and measured the same way, in a child process, in this same run; the
ratio old / new is printed, and every reply of the two simulators is compared: the same seed
must give the same replies (readings, status, busy time), message for message.
"""

from __future__ import annotations

import argparse
import dataclasses
import gc
import json
import os
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CASES = ("production plan", "full sweep as lists", "full sweep point by point")


def _measure(devices: int) -> dict[str, dict]:
    """Each case on a fresh simulator: CPU seconds inside the handler, messages, replies."""
    from instruments.dialect import load_dialect
    from instruments.smu import ScpiSmu
    from instruments.transport import CallableTransport
    from sequencer.lotrun import make_guard
    from sequencer.plan import make_plan
    from sequencer.recipe import load_recipe
    from sequencer.runner import Recorder, measure_device
    from simulator.options import SimOptions, build_instrument
    from simulator.session import Session

    sweep = load_recipe(ROOT / "recipes" / "demo.yaml")
    recipes = {
        CASES[0]: load_recipe(ROOT / "recipes" / "demo-production.yaml"),
        CASES[1]: dataclasses.replace(sweep, lists=True),
        CASES[2]: dataclasses.replace(sweep, lists=False),
    }
    results = {}
    for case, recipe in recipes.items():
        sim = recipe.station.simulator_options
        options = SimOptions(
            seed=int(sim.get("seed", 1)),
            devices=devices,
            preset=str(sim.get("preset", "FLC-1.8")),
            spread=float(sim.get("spread", 1.0)),
            defect_rate=float(sim.get("defect_rate", 0.0)),
            clock="virtual",
        )
        session = Session(build_instrument(options))
        spent = [0.0]
        replies: list[str | None] = []

        def handle(message: str, _session=session, _spent=spent, _replies=replies) -> str | None:
            t0 = time.perf_counter()
            reply = _session.handle(message)
            _spent[0] += time.perf_counter() - t0
            _replies.append(reply)
            return reply

        smu = ScpiSmu(CallableTransport(handle, "sim-in-process"), load_dialect("scpi1999"))
        smu.identify()
        plan = dataclasses.replace(make_plan(recipe), channels=tuple(range(1, devices + 1)))
        guard = make_guard(recipe, smu)
        spent[0], replies[:] = 0.0, []
        gc.collect()
        for channel in plan.channels:
            measure_device(smu, plan, channel, guard, Recorder())
        results[case] = {"cpu_s": spent[0], "messages": len(replies), "replies": replies}
    return results


def _worker(devices: int, simulator_root: str | None) -> None:
    if simulator_root:
        sys.path.insert(0, simulator_root)  # ahead of the worktree: that commit's simulator
    sys.path.insert(1 if simulator_root else 0, str(ROOT))
    import simulator

    results = _measure(devices)
    json.dump({"simulator": simulator.__file__, "results": results}, sys.stdout)


def _run_worker(devices: int, simulator_root: str | None) -> dict:
    command = [sys.executable, __file__, "--worker", "--devices", str(devices)]
    if simulator_root:
        command += ["--simulator-root", simulator_root]
    out = subprocess.run(command, check=True, capture_output=True, text=True, cwd=ROOT)
    return json.loads(out.stdout)


def _least(runs: list[dict]) -> dict:
    """The first run, with each case's CPU time the least of all runs (replies must agree)."""
    best = runs[0]
    for run in runs[1:]:
        for case, result in run["results"].items():
            kept = best["results"][case]
            if result["replies"] != kept["replies"]:
                raise SystemExit(f"{case}: the same simulator gave other replies on a repeat")
            kept["cpu_s"] = min(kept["cpu_s"], result["cpu_s"])
    return best


def _extract_simulator(ref: str, into: Path) -> None:
    archive = into / "simulator.tar"
    with open(archive, "wb") as file:
        subprocess.run(["git", "archive", ref, "simulator"], check=True, cwd=ROOT, stdout=file)
    with tarfile.open(archive) as tar:
        tar.extractall(into, filter="data")


def _report(label: str, run: dict, devices: int) -> dict[str, float]:
    print(f"{label}: simulator from {os.path.relpath(run['simulator'], ROOT)}")
    print(f"  {'case':<28}{'ms/device':>10}{'us/message':>12}{'messages/device':>17}")
    per_device = {}
    for case in CASES:
        r = run["results"][case]
        per_device[case] = 1e3 * r["cpu_s"] / devices
        print(
            f"  {case:<28}{per_device[case]:>10.3f}{1e6 * r['cpu_s'] / r['messages']:>12.1f}"
            f"{r['messages'] / devices:>17.1f}"
        )
    return per_device


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--baseline", help="git ref whose simulator/ to measure as well")
    parser.add_argument("--worker", action="store_true", help=argparse.SUPPRESS)
    parser.add_argument("--simulator-root", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        _worker(args.devices, args.simulator_root)
        return 0
    print(
        f"{args.devices} devices of the demo lot, simulator in process, virtual clock, "
        f"least of {args.repeats} runs\n"
    )
    if not args.baseline:
        new = _least([_run_worker(args.devices, None) for _ in range(args.repeats)])
        _report("this tree", new, args.devices)
        return 0
    olds, news = [], []
    with tempfile.TemporaryDirectory() as tmp:
        _extract_simulator(args.baseline, Path(tmp))
        for _ in range(args.repeats):
            olds.append(_run_worker(args.devices, tmp))
            news.append(_run_worker(args.devices, None))
    old, new = _least(olds), _least(news)
    before = _report(f"baseline {args.baseline}", old, args.devices)
    after = _report("this tree", new, args.devices)
    print(f"\n  {'case':<28}{'old / new':>10}{'replies identical':>22}")
    for case in CASES:
        a, b = old["results"][case]["replies"], new["results"][case]["replies"]
        same = sum(x == y for x, y in zip(a, b, strict=False))
        print(f"  {case:<28}{before[case] / after[case]:>9.2f}x{same:>13} of {max(len(a), len(b))}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
