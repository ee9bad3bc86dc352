"""Overnight-style run, 1,000,000 points by default, with the process's memory sampled over time.

    python benchmarks/overnight_memory.py [--points N] [--sample-every S] [--tracemalloc] [--keep]

A tray of 20 simulated devices is measured pass after pass on a virtual clock (a pass every
10 minutes of schedule time, no real waiting) through the whole store: journal fsynced per
device, SQLite, devices.csv and the SCPI log, as `ccbench run` writes them. For speed the
simulator is the in-process Session behind instruments.loopback.CallableTransport: the same
SCPI text flows through the same driver, only without a socket. The simulator's own records of
every level and relay action grow by design (they are for tests); in a real run they live in
the simulator's process, so the benchmark empties them after each pass and says so. The tray
holds the same devices every pass, so their physics (a bisection per point) is solved once per
device and level and then looked up; the noise is still drawn for every reading. Give
--solve-every-point to solve it every time (about three times slower).

Printed: resident memory (VmRSS) every few seconds with points done, the peak (ru_maxrss),
the growth after the first minute, and a count of what was stored (nothing dropped).
Target: peak under 200 MB, and flat after the first minute.
"""

from __future__ import annotations

import argparse
import math
import resource
import shutil
import sqlite3
import sys
import tempfile
import textwrap
import time
import tracemalloc
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from instruments.dialect import load_dialect  # noqa: E402
from instruments.loopback import CallableTransport, SpyTransport  # noqa: E402
from instruments.smu import ScpiSmu  # noqa: E402
from sequencer.bench.lotrun import run_lot  # noqa: E402
from sequencer.bench.schedule import run_rounds  # noqa: E402
from sequencer.plan.make import make_plan  # noqa: E402
from sequencer.recipe.load import load_recipe  # noqa: E402
from sequencer.recipe.repeat import Repeat  # noqa: E402
from sequencer.store.runstore import RunStore  # noqa: E402
from simulator.options import SimOptions, build_instrument  # noqa: E402
from simulator.session import Session  # noqa: E402

DEVICES = 20
POINTS_PER_DEVICE = 100  # a 96-point sweep and 4 spot readings
TARGET_MB = 200.0
FLAT_AFTER_S = 60.0

STATION = f"""\
station: FLC-bench-N1
instrument: {{resource: sim}}
tray: {{channels: 1-{DEVICES}}}
limits: {{max_voltage: 60 V, max_current: 20 mA, max_power: 250 mW}}
fixture: {{interlocked: true}}
simulator: {{seed: 2611, preset: FLC-1.8, spread: 1.3, defect_rate: 0.05, clock: virtual}}
"""
RECIPE = """\
product: FLC-1.8 current limiter, 1.8 mA nominal
lot: FK2611-07
station: station.yaml
nplc: 0.1
steps:
  - sweep: {name: iv, start: 0 V, stop: 38 V, points: 96, compliance: 5 mA}
  - spot: {name: at-test-voltage, voltage: 25 V, compliance: 5 mA, repeats: 4}
judge:
  test_voltage: 25 V
  knee_voltage: 6 V
  slope_window: 4 V
  limits:
    regulated_current: {min: 1.62 mA, max: 1.98 mA}
    dynamic_impedance: {min: 100 kohm}
"""


def rss_mb() -> float:
    """Resident memory now (Linux /proc), else the peak so far."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return peak_mb()


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux


class Remembered:
    """A simulated device whose current at each level is solved once (bounded: a pass has a
    fixed set of levels), then looked up."""

    def __init__(self, device) -> None:
        self.device = device
        self.currents: dict[tuple, float] = {}
        self.voltages: dict[tuple, float] = {}

    def current(self, v, *temp):
        key = (float(v), *temp)
        if key not in self.currents:
            self.currents[key] = float(self.device.current(v, *temp))
        return self.currents[key]

    def voltage_at(self, i, v_bound, *temp):
        key = (float(i), float(v_bound), *temp)
        if key not in self.voltages:
            self.voltages[key] = float(self.device.voltage_at(i, v_bound, *temp))
        return self.voltages[key]


def remember_physics(instrument) -> None:
    lot = instrument.lot
    devices = tuple(replace(d, device=Remembered(d.device)) for d in lot.devices)
    instrument.lot = lot.with_devices(devices)


class VirtualClock:
    """Schedule time that only moves when the run waits for the next pass."""

    def __init__(self) -> None:
        self.now = 1_780_000_000.0

    def __call__(self) -> float:
        return self.now

    def sleep(self, seconds: float) -> None:
        self.now += seconds


class Sampler:
    def __init__(self, every_s: float) -> None:
        self.every_s = every_s
        self.start = time.monotonic()
        self.next = 0.0
        self.points = 0
        self.samples: list[tuple[float, int, float]] = []

    def device(self, done) -> None:
        self.points += len(done.curve)
        elapsed = time.monotonic() - self.start
        if elapsed >= self.next:
            self.take(elapsed)
            self.next = elapsed + self.every_s

    def take(self, elapsed: float) -> None:
        sample = (elapsed, self.points, rss_mb())
        self.samples.append(sample)
        print(f"{sample[0]:8.1f} s {sample[1]:>10,} points  RSS {sample[2]:7.1f} MB", flush=True)


def main() -> int:
    args = parse_args()
    folder = Path(args.folder) if args.folder else Path(tempfile.mkdtemp(prefix="overnight-"))
    passes = math.ceil(args.points / (DEVICES * POINTS_PER_DEVICE))
    print(textwrap.fill(__doc__.split("\n\n")[2].replace("\n", " "), 100), "\n")
    print(f"{passes} passes x {DEVICES} devices x {POINTS_PER_DEVICE} points into {folder / 'run'}")
    if args.tracemalloc:
        tracemalloc.start()
    try:
        sampler, seconds = run(folder, passes, args.sample_every, not args.solve_every_point)
        report(folder / "run", sampler, seconds, passes, args.tracemalloc)
    finally:
        if not args.keep:
            shutil.rmtree(folder, ignore_errors=True)
    return 0


def parse_args() -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--points", type=int, default=1_000_000)
    parser.add_argument("--sample-every", type=float, default=10.0, metavar="S")
    parser.add_argument("--tracemalloc", action="store_true", help="also trace Python memory")
    parser.add_argument("--folder", help="where the run folder goes (default: a temporary one)")
    parser.add_argument("--keep", action="store_true", help="keep the run folder afterwards")
    parser.add_argument("--solve-every-point", action="store_true", help="no remembered physics")
    return parser.parse_args()


def run(folder: Path, passes: int, sample_every: float, remember: bool) -> tuple[Sampler, float]:
    (folder / "station.yaml").write_text(STATION)
    (folder / "recipe.yaml").write_text(RECIPE)
    recipe = load_recipe(folder / "recipe.yaml")
    plan = make_plan(recipe)
    assert plan.points_per_device == POINTS_PER_DEVICE
    instrument = build_instrument(
        SimOptions(seed=2611, spread=1.3, defect_rate=0.05, clock="virtual")
    )
    if remember:
        remember_physics(instrument)
    store = RunStore.create(
        folder / "run",
        {"started": "2026-05-04T22:00:00.000+00:00", "lot": recipe.lot, "product": recipe.product},
    )
    clock, sampler = VirtualClock(), Sampler(sample_every)
    with open(folder / "run" / "scpi.log", "w", encoding="utf-8") as log:
        transport = SpyTransport(CallableTransport(Session(instrument).handle, "loop"), log)
        smu = ScpiSmu(transport, load_dialect("scpi1999"), sleep=lambda s: None)
        smu.identify()
        smu.safe_state()

        def measure(part):
            return run_lot(recipe, part, smu, store, sampler.device)

        def pass_done(number, summary):
            instrument.smu.applied_levels.clear()  # the simulator's records, see above
            instrument.tray.history.clear()

        started = time.monotonic()
        run_rounds(
            store,
            plan,
            Repeat(600.0, passes=passes),
            measure,
            on_round=pass_done,
            clock=clock,
            sleep=clock.sleep,
        )
        seconds = time.monotonic() - started
    sampler.take(time.monotonic() - sampler.start)
    store.finish("completed", "2026-05-05T06:00:00.000+00:00")
    return sampler, seconds


def report(run: Path, sampler: Sampler, seconds: float, passes: int, traced: bool) -> None:
    peak = peak_mb()
    later = [rss for t, _, rss in sampler.samples if t >= FLAT_AFTER_S]
    first = next((rss for t, _, rss in sampler.samples if t >= FLAT_AFTER_S), None)
    print(f"\n{sampler.points:,} points in {seconds:.0f} s ({sampler.points / seconds:,.0f}/s)")
    print(f"peak resident memory (ru_maxrss): {peak:.1f} MB (target under {TARGET_MB:.0f} MB)")
    if later and first is not None:
        print(
            f"after the first minute: RSS {first:.1f} -> {later[-1]:.1f} MB "
            f"(max {max(later):.1f}, growth {later[-1] - first:+.1f} MB)"
        )
    else:
        print("the run took less than a minute: no samples after the first minute")
    if traced:
        current, top = tracemalloc.get_traced_memory()
        print(f"tracemalloc: {current / 2**20:.1f} MB now, {top / 2**20:.1f} MB peak")
    db = sqlite3.connect(run / "results.sqlite")
    stored_points = db.execute("SELECT COUNT(*) FROM point").fetchone()[0]
    stored_devices = db.execute("SELECT COUNT(*) FROM device").fetchone()[0]
    db.close()
    journal = (run / "journal.jsonl").read_bytes().count(b"\n")
    with open(run / "devices.csv", "rb") as f:
        csv_rows = sum(1 for _ in f) - 1
    print(
        f"stored: {stored_points:,} points, {stored_devices:,} devices in results.sqlite; "
        f"{journal:,} journal lines; {csv_rows:,} CSV rows; {passes * DEVICES:,} expected"
    )
    ok = peak < TARGET_MB and stored_points == sampler.points and journal == passes * DEVICES
    print("meets the target" if ok else "DOES NOT meet the target")


if __name__ == "__main__":
    sys.exit(main())
