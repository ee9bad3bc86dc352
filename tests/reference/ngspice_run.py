"""Run ngspice (Debian package `ngspice`) in batch mode on a two-terminal DC sweep.

The netlist follows REFERENCES.md s3: the device between `anode` and ground, swept by `VA`,
the device current written as -i(VA) with wr_singlescale/wr_vecnames so that numpy reads the
columns. ngspice is looked up on PATH; without it the calling test is skipped, unless the
environment variable CI is set (then a missing ngspice fails the run, as the issue asks).
"""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from simulator.devices import Diode, JfetParams

# REFERENCES.md s3 tightened options, plus gmin: ngspice puts 1e-12 S across every junction
# for convergence, which the simulator's model does not have (it would add 40 pA at 40 V).
OPTIONS = "option numdgt=7 reltol=1e-6 abstol=1e-15 vntol=1e-9 gmin=1e-18"
TIMEOUT_S = 60


def ngspice() -> str:
    """The ngspice program; skips the test without it (fails it when CI is set)."""
    path = shutil.which("ngspice")
    if path is None:
        message = "ngspice is not installed (Debian: apt-get install ngspice)"
        if os.environ.get("CI"):
            pytest.fail(message + "; CI needs it")
        pytest.skip(message)
    return path


def regulator_netlist(
    params: JfetParams, diode: Diode | None, temp_c: float, sweep: tuple[float, float, float]
) -> str:
    """The JFET self-biased through RS, optionally behind a series diode, as a netlist."""
    start, stop, step = sweep
    jfet = (
        f".model JN NJF (VTO={params.vto_v!r} BETA={params.beta!r} LAMBDA={params.lambda_per_v!r}"
        f" IS={params.is_a!r} TCV={params.tcv_v_per_k!r} BEX={params.bex!r}"
        f" XTI={params.xti!r} EG={params.eg_ev!r})"
    )
    drain = "anode" if diode is None else "mid"
    lines = ["* two-terminal JFET current regulator", jfet, "VA anode 0 DC 0"]
    if diode is not None:
        model = f"IS={diode.is_a!r} N={diode.n!r} XTI={diode.xti!r} EG={diode.eg_ev!r}"
        lines.append(f".model DB D ({model})")
        lines.append("D1 anode mid DB")
    lines += [f"J1 {drain} 0 src JN", f"RS1 src 0 {params.rs_ohm!r}", f".temp {temp_c!r}"]
    lines += [
        ".control",
        "  set wr_singlescale",
        "  set wr_vecnames",
        f"  {OPTIONS}",
        f"  dc VA {start!r} {stop!r} {step!r}",
        "  let id = -i(VA)",
        "  wrdata out.dat id",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def run_dc(netlist: str, folder: Path) -> tuple[np.ndarray, np.ndarray]:
    """(swept voltage, device current) from `ngspice -b` on the netlist, run in `folder`."""
    program = ngspice()
    (folder / "circuit.cir").write_text(netlist)
    done = subprocess.run(
        [program, "-b", "circuit.cir"],
        cwd=folder, capture_output=True, text=True, timeout=TIMEOUT_S,
    )  # fmt: skip
    out = folder / "out.dat"
    # With a .control section and no .print line, `ngspice -b` exits 1 after a good run
    # ("no simulations run"): success is the data file and no error in the output.
    said = done.stdout + done.stderr
    if not out.exists() or "error" in said.lower():
        raise RuntimeError(f"ngspice failed ({done.returncode}): {said[-1200:]}")
    data = np.loadtxt(out, skiprows=1, ndmin=2)
    return data[:, 0], data[:, 1]
