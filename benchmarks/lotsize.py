"""The lot reports on lots of 10,000 and 100,000 devices: time, peak memory, and how both grow.

    python benchmarks/lotsize.py [--sizes 10000 100000] [--rounds 3] [--keep DIR]

The stores are built quickly but from real data: one 20-device run of recipes/demo.yaml on the
embedded simulator (`ccbench run --sim`, virtual clock) is written by ccbench itself; its
results.sqlite is then copied and its device and point rows repeated in SQL (INSERT ... SELECT
into the same tables, each copy's devices renamed), until the lot has the size asked for. So
every row is one the store's own writer wrote, 86 points a device; the journal and
devices.csv are not repeated (the reports read results.sqlite only).

Each command then runs as its own process (`python -m sequencer.cli ...`), the sizes in turn
within each round, and is timed to its exit; its peak resident memory is the child's own
(os.wait4's ru_maxrss). Printed: the median time and the largest peak of each command at each
size, the targets at 100,000 devices, and the growth from the smallest size to the largest
against the growth in devices (at most 1.0x of linear: time and memory may grow at most as
fast as the lot).
"""

from __future__ import annotations

import argparse
import os
import shutil
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PYTHON = sys.executable
TEMPLATE_DEVICES = 20

# (label, arguments after `ccbench`, with {run} for the run folder and {out} for a scratch
# folder; target seconds and MB at 100,000 devices, or None)
COMMANDS: list[tuple[str, list[str], float | None, float | None]] = [
    ("report --text", ["report", "--text", "{run}"], 2.0, 300.0),
    ("summary after a run", ["-c", "after-run", "{run}"], 2.0, 300.0),
    ("report (HTML)", ["report", "{run}", "--out", "{out}/report"], 30.0, 600.0),
    ("results --csv", ["results", "{run}", "--csv", "{out}/all.csv"], None, None),
]
AFTER_RUN = (
    "import sys; from pathlib import Path; from rich.console import Console; "
    "from sequencer.cli.reportcmd import after_run; after_run(Console(), Path(sys.argv[1]))"
)


def template(scratch: Path) -> Path:
    """A real 20-device run folder of the demo recipe, on the virtual clock."""
    bench = scratch / "template"
    bench.mkdir()
    for name in ("demo.yaml", "demo-station.yaml"):
        shutil.copy(ROOT / "recipes" / name, bench / name)
    station = bench / "demo-station.yaml"
    station.write_text(station.read_text().replace("clock: real", "clock: virtual"))
    command = [PYTHON, "-m", "sequencer.cli", "run", "demo.yaml", "--sim", "--out", "run"]
    done = subprocess.run(command, cwd=bench, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        sys.exit(f"the template run failed: {done.stdout[-600:]}{done.stderr[-600:]}")
    return bench / "run"


def grow(run: Path, folder: Path, devices: int) -> None:
    """`folder`: the template run with its rows repeated to `devices` devices (bulk SQL)."""
    folder.mkdir(parents=True)
    for name in ("manifest.json", "results.sqlite"):
        if (run / name).exists():
            shutil.copy(run / name, folder / name)
    copies = -(-devices // TEMPLATE_DEVICES) - 1  # the template's own rows are copy 0
    db = sqlite3.connect(folder / "results.sqlite")
    try:
        device_cols = [r[1] for r in db.execute("PRAGMA table_info(device)")]
        point_cols = [r[1] for r in db.execute("PRAGMA table_info(point)")]
        renamed = {"device": "device || printf('-%06d', k)", "seq": f"seq + k * {TEMPLATE_DEVICES}"}
        with db:
            db.execute("CREATE TEMP TABLE copy (k INTEGER PRIMARY KEY)")
            db.executemany("INSERT INTO copy VALUES (?)", [(k,) for k in range(1, copies + 1)])
            for table, cols in (("device", device_cols), ("point", point_cols)):
                chosen = ", ".join(renamed.get(c, c) for c in cols)
                db.execute(
                    f"INSERT INTO {table} ({', '.join(cols)}) "
                    f"SELECT {chosen} FROM main.{table} AS t, copy"
                    " ORDER BY k, t.rowid"  # SQLite reads the whole SELECT before inserting
                )
    finally:
        db.close()


def run_one(args: list[str], run: Path, out: Path) -> tuple[float, float]:
    """(seconds, peak MB) of one command as its own process."""
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir(parents=True)
    words = [a.format(run=run, out=out) for a in args]
    command = [PYTHON, "-c", AFTER_RUN, words[-1]] if words[0] == "-c" else [
        PYTHON, "-m", "sequencer.cli", *words]  # fmt: skip
    start = time.perf_counter()
    child = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(child.pid, 0)
    took = time.perf_counter() - start
    child.returncode = os.waitstatus_to_exitcode(status)
    error = child.stderr.read().decode() if child.stderr else ""
    if child.returncode != 0:
        sys.exit(f"{' '.join(words)} failed ({child.returncode}): {error[-600:]}")
    return took, usage.ru_maxrss / 1024  # kB on Linux


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--keep", type=Path, help="build the stores here and keep them")
    options = parser.parse_args()
    scratch = options.keep or Path(tempfile.mkdtemp(prefix="ccbench-lotsize-"))
    scratch.mkdir(parents=True, exist_ok=True)
    try:
        measure(scratch, sorted(options.sizes), options.rounds)
    finally:
        if options.keep is None:
            shutil.rmtree(scratch, ignore_errors=True)


def measure(scratch: Path, sizes: list[int], rounds: int) -> None:
    run = template(scratch)
    folders = {}
    for size in sizes:
        start = time.perf_counter()
        folders[size] = scratch / f"lot-{size}"
        grow(run, folders[size], size)
        count, points = _counts(folders[size])
        print(f"built {count:,} devices, {points:,} points in {time.perf_counter() - start:.1f} s")
    times = {(label, s): [] for label, *_ in COMMANDS for s in sizes}
    peaks = {(label, s): 0.0 for label, *_ in COMMANDS for s in sizes}
    for _ in range(rounds):
        for label, args, _, _ in COMMANDS:
            for size in sizes:
                took, peak = run_one(args, folders[size], scratch / "out")
                times[label, size].append(took)
                peaks[label, size] = max(peaks[label, size], peak)
    report(times, peaks, sizes, rounds)


def report(times, peaks, sizes: list[int], rounds: int) -> None:
    small, large = sizes[0], sizes[-1]
    print(f"\n{rounds} rounds; median time, largest peak RSS; growth {small:,} -> {large:,}"
          f" devices ({large / small:g}x the devices)")  # fmt: skip
    for label, _, target_s, target_mb in COMMANDS:
        cells = [
            f"{size:,}: {statistics.median(times[label, size]):.2f} s {peaks[label, size]:.0f} MB"
            for size in sizes
        ]
        grown_t = statistics.median(times[label, large]) / statistics.median(times[label, small])
        grown_m = peaks[label, large] / peaks[label, small]
        linear = large / small
        growth = (f"time x{grown_t:.2f} ({grown_t / linear:.2f} of linear), "
                  f"memory x{grown_m:.2f} ({grown_m / linear:.2f} of linear)")  # fmt: skip
        target = ""
        if target_s is not None and large >= 100_000:
            t, m = statistics.median(times[label, large]), peaks[label, large]
            met = t < target_s and m < target_mb
            target = f"; target < {target_s:g} s, < {target_mb:g} MB: {'met' if met else 'NOT met'}"
        print(f"{label:22s} {'; '.join(cells)}; {growth}{target}")


def _counts(folder: Path) -> tuple[int, int]:
    db = sqlite3.connect(folder / "results.sqlite")
    try:
        (devices,) = db.execute("SELECT count(*) FROM device").fetchone()
        (points,) = db.execute("SELECT count(*) FROM point").fetchone()
    finally:
        db.close()
    return devices, points


if __name__ == "__main__":
    main()
