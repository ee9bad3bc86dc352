"""How closely the simulator's real clock keeps the modelled instrument time, and how much faster
the virtual clock runs the same work, measured in this one run.

    python benchmarks/sim_clock.py [--repeats R]

The run is the one of tests/simulator/test_sim_timing.py (2 devices x 21 points, 10 ms settling
and 1 NPLC each, the embedded simulator over pyvisa-py). Target: the real-clock run lasts within
10 % of the instrument time it models (wall / busy <= 1.10); the virtual run takes a small share
of it.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from tests.simulator.test_sim_timing import timed_run  # noqa: E402

TARGET = 1.10


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    real, virtual = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for n in range(args.repeats):
            wall, busy = timed_run(Path(tmp) / f"real-{n}", "real")
            real.append(wall / busy)
            wall, busy = timed_run(Path(tmp) / f"virtual-{n}", "virtual")
            virtual.append(wall / busy)
    ratio = statistics.median(real)
    print(
        f"real clock: wall / instrument time = {ratio:.3f} (median of {args.repeats}; "
        f"target <= {TARGET:.2f}: {'met' if ratio <= TARGET else 'NOT met'})"
    )
    print(f"virtual clock: wall / instrument time = {statistics.median(virtual):.3f}")


if __name__ == "__main__":
    main()
