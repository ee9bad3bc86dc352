"""How soon the command line answers, against a bare interpreter start.

    python benchmarks/startup.py [--rounds N]

Each round starts every command below once as its own process, in a new random order (so a
burst of load on the machine falls on all of them alike), and times it to its exit. The figure
of a command is the median of its rounds; its ratio is that median over the median of
`python -c pass` from the same rounds. Targets: `ccbench --help` at most 5x and
`ccbench check recipes/demo.yaml` at most 15x.

The rows after the commands are the libraries `ccbench check` still loads, each started alone
(`python -c "import numpy"`, say), so the split of the check's time can be read from the same
run; pydantic is timed too where it is installed, for the recipe models that may load it.
"""

from __future__ import annotations

import argparse
import importlib.util
import random
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PYTHON = sys.executable
CCBENCH = [PYTHON, "-m", "sequencer.cli"]

# (label, command, target ratio or None)
COMMANDS: list[tuple[str, list[str], float | None]] = [
    ("python -c pass", [PYTHON, "-c", "pass"], None),
    ("ccbench --help", [*CCBENCH, "--help"], 5.0),
    ("ccbench check recipes/demo.yaml", [*CCBENCH, "check", "recipes/demo.yaml"], 15.0),
    ("ccbench check recipes/demo-production.yaml",
     [*CCBENCH, "check", "recipes/demo-production.yaml"], 15.0),
    ("ccbench report --help", [*CCBENCH, "report", "--help"], None),
    ("ccbench results --help", [*CCBENCH, "results", "--help"], None),
]  # fmt: skip
LIBRARIES = ["numpy", "yaml", "rich.console", "rich.table", "pint", "pandas", "pydantic"]


def rows() -> list[tuple[str, list[str], float | None]]:
    found = [m for m in LIBRARIES if importlib.util.find_spec(m.partition(".")[0]) is not None]
    return COMMANDS + [(f"import {m}", [PYTHON, "-c", f"import {m}"], None) for m in found]


def once(command: list[str]) -> float:
    start = time.perf_counter()
    done = subprocess.run(command, cwd=ROOT, capture_output=True, check=False)
    took = time.perf_counter() - start
    if done.returncode != 0:
        sys.exit(f"{' '.join(command)} failed ({done.returncode}): {done.stderr.decode()[-400:]}")
    return took


def measure(rounds: int) -> dict[str, list[float]]:
    table = rows()
    times: dict[str, list[float]] = {label: [] for label, _, _ in table}
    for _ in range(rounds):
        for label, command, _ in random.sample(table, len(table)):
            times[label].append(once(command))
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=21, help="interleaved rounds (default 21)")
    rounds = parser.parse_args().rounds
    times = measure(rounds)
    base = statistics.median(times["python -c pass"])
    print(f"{rounds} interleaved rounds; medians; python -c pass = {base * 1e3:.1f} ms")
    print(f"{'command':45s} {'median':>9s} {'spread':>17s} {'ratio':>7s}  target")
    for label, _, target in rows():
        t = times[label]
        low, high = min(t), max(t)
        ratio = statistics.median(t) / base
        verdict = (
            "" if target is None else f"<= {target:g}x: {'met' if ratio <= target else 'NOT met'}"
        )
        spread = f"{low * 1e3:.0f}-{high * 1e3:.0f} ms"
        print(
            f"{label:45s} {statistics.median(t) * 1e3:7.1f}ms {spread:>17s} {ratio:6.1f}x",
            verdict,
        )


if __name__ == "__main__":
    main()
