"""10,000 readings fetched from the SMU's buffer as one binary block (REAL,32) against the same
readings as ASCII, through the driver (instruments.smu.ScpiSmu, the code list_sweep uses) over
TCP to the simulated SMU in its own process.

    python benchmarks/blocks.py [--readings N] [--repeats R]

The buffer is filled once (a source list of N levels from 0 to 40 V, so that the currents and
their bytes vary; FORMat:FIELds CURRent; INITiate on the virtual clock, so nothing waits) and
then fetched R times each way; FETCh? answers the same readings every time. Printed: the
median time per fetch each way, their ratio, the bytes on the wire, and how many 0x0A bytes
the block carries (each would cost pyvisa's own block reader an extra read call, SCPI.md s0
item 7; pyvisa's `query_binary_values` is timed beside ours for that). Target: binary at
least 5x faster than ASCII.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from instruments import connect  # noqa: E402
from sequencer.recipe.load import load_recipe  # noqa: E402

TARGET = 5.0


def median_s(call, repeats: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = call()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), result


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--readings", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=20)
    args = parser.parse_args()
    recipe = load_recipe(ROOT / "recipes" / "demo.yaml")
    options = {**recipe.station.simulator_options, "clock": "virtual"}
    with connect("sim", sim_options=options, timeout_s=10.0) as conn:
        smu, transport = conn.smu, conn.smu.transport
        smu.select_channel(1)
        smu.configure(limit_a=5e-3, nplc=0.01, settle_s=0.0)
        smu.set_voltage(0.0)
        smu.output(True)
        levels = ",".join(f"{v:.6E}" for v in np.linspace(0.0, 40.0, args.readings))
        transport.write(f"SOUR:VOLT:MODE LIST;:SOUR:LIST:VOLT {levels}")
        transport.write(f"TRIG:COUN {args.readings};:FORM:FIEL CURR")
        transport.write("INIT")
        smu.check_errors()
        # The driver's two fetches (ScpiSmu._fetch): one block, or ASCII parsed field by field.
        transport.write("FORM ASC")
        ascii_s, ascii_values = median_s(lambda: smu._fetch(False), args.repeats)
        text_bytes = len(transport.query("FETC?")) + 1
        transport.write("FORM REAL,32;:FORM:BORD SWAP")
        block_s, block_values = median_s(lambda: smu._fetch(True), args.repeats)
        raw = transport._inst  # pyvisa's own resource, for its own block reader beside ours
        visa_s, visa_values = median_s(
            lambda: raw.query_binary_values("FETC?", datatype="f", container=np.array),
            args.repeats,
        )
        payload = np.asarray(block_values, "<f4").tobytes()
        transport.write("FORM ASC;:TRIG:COUN 1;:SOUR:VOLT:MODE FIX")
        smu.safe_state()
    assert len(ascii_values) == len(block_values) == len(visa_values) == args.readings
    np.testing.assert_allclose(block_values, ascii_values, rtol=1e-6)  # float32 vs 7 digits
    ratio = ascii_s / block_s
    print(f"{args.readings} readings from the buffer, median of {args.repeats} fetches\n")
    print(f"ASCII (NR3 text, parsed per field):  {1e3 * ascii_s:8.2f} ms  {text_bytes:>8} bytes")
    print(f"binary block (REAL,32, our reader):  {1e3 * block_s:8.2f} ms  "
          f"{len(payload) + 8:>8} bytes, {payload.count(10)} LF bytes in the payload")  # fmt: skip
    print(f"binary block (pyvisa's own reader):  {1e3 * visa_s:8.2f} ms")
    print(f"\nratio ASCII / binary: {ratio:.1f}x (target >= {TARGET:g}x: "
          f"{'met' if ratio >= TARGET else 'NOT met'})")  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())
