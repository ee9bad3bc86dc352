"""The sequencer's own cost per measured point, against one raw socket round trip on loopback.

    python benchmarks/overhead.py [--devices N]

Each run is what `ccbench run` does between the safe start and the output-off: the embedded
simulator as its own process (`python -m simulator serve`) on the virtual clock, pyvisa-py over
TCP, the SCPI spy log, every device judged and stored (journal fsynced, SQLite, CSV). On the
virtual clock the instrument's modelled time (settling, apertures: SIMulation:BUSY?) adds up
without passing, so the wall time is all overhead except for one part: the simulator's own
computing (parsing, solving the device models), which a real instrument does inside its own
time. That part is read from the simulator process's CPU time (/proc, Linux) and printed; the
overhead per point is wall time minus it, what the runner, the driver, pyvisa, the judge and
the store add. The column before it keeps it in, for the reader who prefers the larger figure.

The raw round trip is a 6-byte message and its echo through a plain Python socket to a plain
Python echo server in another process, TCP_NODELAY on both sides: what one exchange costs with
no VISA, no SCPI and no instrument at all: the median of 5,000 round trips timed one by one
(after 200 to warm up), printed with its spread (5-95 %, min, max), so that a burst of load on
the machine moves neither the baseline nor the ratios built on it. Target: at most 1.5x that
per measured point.

A device also has a fixed cost whatever its number of points: its exchanges (channel switch,
configuration, error checks, the list's start and fetch, the output off), judging it, and
storing it (journal fsynced, SQLite, CSV). So the script also measures the same sweep with
four times the points: the difference between the two runs, divided by the extra points, is
what one more point costs (the fixed cost drops out), and the rest is the device's fixed cost,
printed beside the number of exchanges it makes and what they would take as raw round trips.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from instruments import connect  # noqa: E402
from sequencer.bench.lotrun import make_guard, run_lot  # noqa: E402
from sequencer.plan.make import make_plan  # noqa: E402
from sequencer.recipe.load import SweepStep, load_recipe  # noqa: E402
from sequencer.run.shutdown import make_safe, start_safe  # noqa: E402
from sequencer.store.runstore import RunStore  # noqa: E402

TARGET = 1.5
DENSER = 4  # the second run's sweeps: this many times the points
ECHO = """
import socket, sys
s = socket.socket(); s.bind(("127.0.0.1", 0)); s.listen(1)
print(s.getsockname()[1], flush=True)
c, _ = s.accept(); c.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
while data := c.recv(65536):
    c.sendall(data)
"""


WARM_UP = 200  # round trips before timing: the first ones pay for caches and the scheduler


def raw_round_trips_s(count: int = 5000) -> list[float]:
    """`count` single round trips (one send and the echo's recv), each timed alone, seconds."""
    server = subprocess.Popen([sys.executable, "-c", ECHO], stdout=subprocess.PIPE, text=True)
    try:
        port = int(server.stdout.readline())
        with socket.create_connection(("127.0.0.1", port)) as client:
            client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            trips = []
            for k in range(WARM_UP + count):
                t0 = time.perf_counter_ns()
                client.sendall(b"READ?\n")
                client.recv(64)
                if k >= WARM_UP:
                    trips.append((time.perf_counter_ns() - t0) * 1e-9)
        return trips
    finally:
        server.wait(timeout=10)


def describe_trips(trips: list[float]) -> str:
    """Median and spread of the round trips, in microseconds."""
    ordered = sorted(trips)
    cut = statistics.quantiles(ordered, n=20)  # 5 % steps
    return (
        f"median {1e6 * statistics.median(ordered):.1f} us of {len(ordered)} round trips; "
        f"5-95 % {1e6 * cut[0]:.1f}-{1e6 * cut[-1]:.1f} us, "
        f"min {1e6 * ordered[0]:.1f}, max {1e6 * ordered[-1]:.0f} us"
    )


def busy_s(smu) -> float:
    return float(smu.transport.query("SIM:BUSY?"))


def cpu_s(pid: int) -> float:
    """User + system CPU seconds of a process so far (Linux /proc)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def one_run(recipe, devices: int, folder: Path) -> tuple[float, float, float, int]:
    """(wall s, instrument s, simulator CPU s, points) of measuring, judging and storing every
    device; the instrument's seconds passed on its virtual clock only."""
    options = {**recipe.station.simulator_options, "clock": "virtual", "devices": devices}
    plan = dataclasses.replace(make_plan(recipe), channels=tuple(range(1, devices + 1)))
    manifest = {"started": "2026-05-04T22:00:00.000+00:00", "lot": recipe.lot}
    store = RunStore.create(folder, manifest)
    points = 0

    def counted(done) -> None:
        nonlocal points
        points += len(done.curve)

    with open(folder / "scpi.log", "a", encoding="utf-8") as log:
        conn = connect("sim", spy_log=log, sim_options=options, timeout_s=5.0)
        try:
            start_safe(conn.smu)
            guard = make_guard(recipe, conn.smu)
            pid = conn._simulator._process.pid  # the embedded simulator's process
            before, cpu, t0 = busy_s(conn.smu), cpu_s(pid), time.perf_counter()
            run_lot(recipe, plan, conn.smu, store, counted, guard=guard)
            wall = time.perf_counter() - t0
            busy, cpu = busy_s(conn.smu) - before, cpu_s(pid) - cpu
            make_safe(conn, guard.level_v)
        finally:
            conn.close()
            store.finish("completed", "2026-05-04T22:10:00.000+00:00")
    return wall, busy, cpu, points


def denser(recipe, factor: int):
    """The recipe with its sweep steps `factor` times as dense (same span, same everything else)."""
    steps = tuple(
        dataclasses.replace(st, points=(st.points - 1) * factor + 1) if isinstance(st, SweepStep)
        else st
        for st in recipe.steps
    )  # fmt: skip
    return dataclasses.replace(recipe, steps=steps)


def marginal(label: str, recipe, devices: int, rtt: float, tmp: Path) -> float:
    """Print and return what one more point costs (overhead, simulator computing left out)."""
    runs = []
    for k, r in enumerate((recipe, denser(recipe, DENSER))):
        folder = tmp / f"{label.replace(' ', '-').replace(',', '')}-{k}"
        wall, _, cpu, points = one_run(r, devices, folder)
        runs.append((wall - cpu, points))
    (over_a, points_a), (over_b, points_b) = runs
    per_point = (over_b - over_a) / (points_b - points_a)
    fixed = over_a / devices - per_point * points_a / devices
    print(
        f"{label:<28}{points_a // devices:>5} /{points_b // devices:>5}{1e6 * per_point:>12.0f} us"
        f"{per_point / rtt:>7.2f}x{1e3 * fixed:>12.2f} ms"
    )
    return per_point / rtt


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", type=int, default=40)
    args = parser.parse_args()
    trips = raw_round_trips_s()
    rtt = statistics.median(trips)
    print(f"raw socket round trip on loopback (Python, echo in another process): "
          f"{describe_trips(trips)}\n")  # fmt: skip
    full = load_recipe(ROOT / "recipes" / "demo.yaml")
    production = load_recipe(ROOT / "recipes" / "demo-production.yaml")
    runs = (
        ("full sweep, point by point", full),
        ("full sweep, lists", dataclasses.replace(full, lists=True)),
        ("production plan, lists", production),
    )
    print(
        f"{'run (' + str(args.devices) + ' devices)':<28}{'points':>7}{'wall s':>8}"
        f"{'instr. s':>9}{'sim CPU s':>10}{'with sim':>10}{'overhead/pt':>13}{'x rtt':>8}"
    )
    ratios = {}
    with tempfile.TemporaryDirectory(prefix="overhead-") as tmp:
        for k, (label, recipe) in enumerate(runs):
            wall, busy, cpu, points = one_run(recipe, args.devices, Path(tmp) / f"run{k}")
            per_point = (wall - cpu) / points  # the modelled instrument time never passed
            ratios[label] = per_point / rtt
            print(
                f"{label:<28}{points:>7}{wall:>8.2f}{busy:>9.2f}{cpu:>10.2f}"
                f"{1e6 * wall / points:>7.0f} us{1e6 * per_point:>10.0f} us"
                f"{ratios[label]:>7.2f}x"
            )
        print(
            f"\none more point, and a device's fixed cost ({args.devices // 2} devices; each sweep "
            f"{DENSER}x as dense the second time)"
        )
        print(f"{'run':<28}{'points/device':>13}{'a point':>11}{'x rtt':>8}{'a device':>14}")
        extra = {}
        for label, recipe in runs[:2]:
            extra[label] = marginal(label, recipe, args.devices // 2, rtt, Path(tmp))
    print()
    for label, ratio in ratios.items():
        verdict = "met" if ratio <= TARGET else "NOT met"
        print(f"{label}: {ratio:.2f}x a raw round trip per point (target <= {TARGET}x: {verdict})")
    for label, ratio in extra.items():
        verdict = "met" if ratio <= TARGET else "NOT met"
        print(f"{label}, one more point: {ratio:.2f}x a raw round trip (<= {TARGET}x: {verdict})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
