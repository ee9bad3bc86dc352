"""The simulator's own computing per device: CPU time spent inside the simulated SMU's message
handler while the real driver and runner measure a lot, for the production plan
(recipes/demo-production.yaml), the full 81-point sweep as instrument-side lists
(recipes/demo.yaml with `lists: true`) and the full sweep point by point (recipes/demo.yaml).

    python benchmarks/simulator_cpu.py [--devices N] [--repeats R] [--baseline GIT_REF]

In process: simulator.session.Session behind instruments.loopback.CallableTransport, virtual
clock, the demo station's lot; nothing sleeps, so the time inside `Session.handle` is the
simulator's CPU (parsing, the device solves, noise, formatting), and the driver, runner and
judge are outside it. Over TCP: the same lot served by `python -m simulator serve` (virtual
clock) and measured through pyvisa, the server process's CPU from the kernel's per-thread
accounting (Linux /proc), which adds the sockets' reads and writes and runs the Python code
with the caches its client left behind. Each measurement runs R times in fresh child
processes (baseline and this tree taking turns) and the least of each case is kept: other work
on the machine can only add to a figure.

With `--baseline REF` the simulator package of that git commit (e.g. `main`) is extracted
into a temporary folder and measured the same way, in this same run; the ratio old / new is
printed, and every reply of the two simulators in process is compared: the same seed must give
the same replies (readings, status, busy time), message for message.
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


def _recipes() -> dict:
    from sequencer.recipe.load import load_recipe

    sweep = load_recipe(ROOT / "recipes" / "demo.yaml")
    return {
        CASES[0]: load_recipe(ROOT / "recipes" / "demo-production.yaml"),
        CASES[1]: dataclasses.replace(sweep, lists=True),
        CASES[2]: dataclasses.replace(sweep, lists=False),
    }


def _lot(recipe, devices: int) -> dict:
    sim = recipe.station.simulator_options
    return {
        "seed": int(sim.get("seed", 1)),
        "devices": devices,
        "preset": str(sim.get("preset", "FLC-1.8")),
        "spread": float(sim.get("spread", 1.0)),
        "defect_rate": float(sim.get("defect_rate", 0.0)),
    }


def _run_lot(smu, recipe, devices: int) -> None:
    from sequencer.bench.lotrun import make_guard
    from sequencer.plan.make import make_plan
    from sequencer.run.device import measure_device
    from sequencer.run.recorder import Recorder

    plan = dataclasses.replace(make_plan(recipe), channels=tuple(range(1, devices + 1)))
    guard = make_guard(recipe, smu)
    for channel in plan.channels:
        measure_device(smu, plan, channel, guard, Recorder())


def _in_process(recipe, devices: int) -> dict:
    """CPU seconds inside the handler, the messages and every reply."""
    from instruments.dialect import load_dialect
    from instruments.loopback import CallableTransport
    from instruments.smu import ScpiSmu
    from simulator.options import SimOptions, build_instrument
    from simulator.session import Session

    session = Session(build_instrument(SimOptions(clock="virtual", **_lot(recipe, devices))))
    spent = [0.0]
    replies: list[str | None] = []

    def handle(message: str) -> str | None:
        t0 = time.perf_counter()
        reply = session.handle(message)
        spent[0] += time.perf_counter() - t0
        replies.append(reply)
        return reply

    smu = ScpiSmu(CallableTransport(handle, "sim-in-process"), load_dialect("scpi1999"))
    smu.identify()
    spent[0], replies[:] = 0.0, []
    gc.collect()
    _run_lot(smu, recipe, devices)
    return {"cpu_s": spent[0], "messages": len(replies), "replies": replies}


def _process_cpu_s(pid: int) -> float:
    """CPU seconds the live threads of a process have run (Linux: /proc/PID/task/*/schedstat,
    nanoseconds, where /proc/PID/stat only counts 10 ms ticks)."""
    tasks = Path(f"/proc/{pid}/task")
    return 1e-9 * sum(int((t / "schedstat").read_text().split()[0]) for t in tasks.iterdir())


def _server_cpu(recipe, devices: int, simulator_root: Path) -> float:
    """CPU seconds a `python -m simulator serve` process spends serving the lot over TCP, from
    after *IDN? to the last reply (the connection's own thread, the accept loop, and so on)."""
    from instruments import connect

    command = [sys.executable, "-m", "simulator", "serve", "--port", "0", "--clock", "virtual"]
    for name, value in _lot(recipe, devices).items():
        command += [f"--{name.replace('_', '-')}", str(value)]
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(simulator_root), str(ROOT)])}
    server = subprocess.Popen(
        [*command, "--exit-with-stdin"],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
        cwd=simulator_root,  # -m finds the package in the working directory first
        env=env,
    )
    assert server.stdin is not None and server.stdout is not None
    try:
        with connect(server.stdout.readline().strip(), timeout_s=10.0) as conn:
            before = _process_cpu_s(server.pid)
            _run_lot(conn.smu, recipe, devices)
            return _process_cpu_s(server.pid) - before
    finally:
        server.stdin.close()
        server.stdout.close()
        server.wait(timeout=10)


def _measure(devices: int, simulator_root: Path) -> dict[str, dict]:
    results = {}
    for case, recipe in _recipes().items():
        results[case] = _in_process(recipe, devices)
        results[case]["tcp_cpu_s"] = _server_cpu(recipe, devices, simulator_root)
    return results


def _worker(devices: int, simulator_root: str | None) -> None:
    root = Path(simulator_root) if simulator_root else ROOT
    if simulator_root:
        sys.path.insert(0, simulator_root)  # ahead of the worktree: that commit's simulator
    sys.path.insert(1 if simulator_root else 0, str(ROOT))
    import simulator

    results = _measure(devices, root)
    json.dump({"simulator": simulator.__file__, "results": results}, sys.stdout)


def _run_worker(devices: int, simulator_root: str | None) -> dict:
    command = [sys.executable, __file__, "--worker", "--devices", str(devices)]
    if simulator_root:
        command += ["--simulator-root", simulator_root]
    out = subprocess.run(command, check=True, capture_output=True, text=True, cwd=ROOT)
    return json.loads(out.stdout)


def _least(runs: list[dict]) -> dict:
    """The first run, with each figure the least of all runs (the replies must agree)."""
    best = runs[0]
    for run in runs[1:]:
        for case, result in run["results"].items():
            kept = best["results"][case]
            if result["replies"] != kept["replies"]:
                raise SystemExit(f"{case}: the same simulator gave other replies on a repeat")
            for figure in ("cpu_s", "tcp_cpu_s"):
                kept[figure] = min(kept[figure], result[figure])
    return best


def _extract_simulator(ref: str, into: Path) -> None:
    archive = into / "simulator.tar"
    with open(archive, "wb") as file:
        subprocess.run(["git", "archive", ref, "simulator"], check=True, cwd=ROOT, stdout=file)
    with tarfile.open(archive) as tar:
        tar.extractall(into, filter="data")


def _report(label: str, run: dict, devices: int) -> dict[str, tuple[float, float]]:
    print(f"{label}: simulator from {os.path.relpath(run['simulator'], ROOT)}")
    print(
        f"  {'case':<28}{'ms/device':>10}{'us/message':>12}{'messages/device':>17}"
        f"{'TCP process ms/device':>23}"
    )
    per_device = {}
    for case in CASES:
        r = run["results"][case]
        tcp = 1e3 * r["tcp_cpu_s"] / devices
        per_device[case] = (1e3 * r["cpu_s"] / devices, tcp)
        print(
            f"  {case:<28}{per_device[case][0]:>10.3f}{1e6 * r['cpu_s'] / r['messages']:>12.1f}"
            f"{r['messages'] / devices:>17.1f}{tcp:>23.3f}"
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
    print(f"\n  {'case':<28}{'old / new':>10}{'TCP process':>13}{'replies identical':>22}")
    for case in CASES:
        a, b = old["results"][case]["replies"], new["results"][case]["replies"]
        same = sum(x == y for x, y in zip(a, b, strict=False))
        (old_in, old_tcp), (new_in, new_tcp) = before[case], after[case]
        print(
            f"  {case:<28}{old_in / new_in:>9.2f}x{old_tcp / new_tcp:>12.2f}x"
            f"{same:>13} of {max(len(a), len(b))}"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
