"""ngspice as an outside reference: write a netlist, run `ngspice -b`, read its wrdata output.

The netlist pattern, options and the way to read the output follow REFERENCES.md s3
[src: ngspice manual, JFET chapter; the options give about 7 digits]. The device under test sits
between node `anode` and ground (the cathode); the swept source is VA, and the device current is
-i(VA). Without ngspice the calling test is skipped, unless the environment variable CI is set:
then a missing ngspice fails, so a CI machine cannot pass by skipping.
"""

from __future__ import annotations

import os
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

OPTIONS = "option numdgt=7 reltol=1e-6 abstol=1e-15 vntol=1e-9"  # REFERENCES.md s3


@dataclass(frozen=True)
class Part:
    """A two-terminal part as netlist text: elements between `anode` and 0, plus models."""

    name: str
    elements: str

    def netlist(self, start_v: float, stop_v: float, step_v: float, out: Path) -> str:
        return "\n".join(
            [
                f"* {self.name}",
                self.elements.strip(),
                "VA anode 0 DC 0",
                ".control",
                "  set wr_singlescale",
                "  set wr_vecnames",
                f"  {OPTIONS}",
                f"  dc VA {start_v:.12g} {stop_v:.12g} {step_v:.12g}",
                "  let id = -i(VA)",
                f"  wrdata {out} id",
                ".endc",
                ".end",
                "",
            ]
        )


def ngspice() -> str:
    """The ngspice binary, or skip (fail under CI)."""
    found = shutil.which("ngspice")
    if found:
        return found
    if os.environ.get("CI"):
        pytest.fail("ngspice is required under CI (set up by the Debian package 'ngspice')")
    pytest.skip("ngspice not installed")


def dc_sweep(
    part: Part, start_v: float, stop_v: float, step_v: float, folder: Path
) -> tuple[np.ndarray, np.ndarray]:
    """(voltage, current) of a DC sweep of the part, computed by ngspice."""
    folder.mkdir(parents=True, exist_ok=True)
    tag = f"{part.name}-{step_v:g}".replace(".", "p")
    out = folder / f"{tag}.dat"
    cir = folder / f"{tag}.cir"
    cir.write_text(part.netlist(start_v, stop_v, step_v, out))
    out.unlink(missing_ok=True)
    # ngspice 39 in batch mode exits 1 when a netlist has no .plot/.print line, even after a
    # good run: the written data file is the sign of success.
    done = subprocess.run(
        [ngspice(), "-b", str(cir)], capture_output=True, text=True, timeout=60, check=False
    )
    if not out.exists() or "error" in done.stdout.lower():
        raise RuntimeError(f"ngspice failed on {cir}:\n{done.stdout[-2000:]}{done.stderr[-2000:]}")
    data = np.loadtxt(out, skiprows=1, ndmin=2)  # wr_singlescale + wr_vecnames: header, columns
    expected = round(abs(stop_v - start_v) / step_v) + 1
    if len(data) != expected:  # ngspice gives up part-way when a junction current explodes
        raise RuntimeError(f"ngspice stopped after {len(data)} of {expected} points on {cir}")
    return data[:, 0], data[:, 1]


def jfet_model(vto: float, idss: float, lam: float) -> str:
    beta = idss / vto**2  # Shichman-Hodges: IDSS = BETA VTO^2 (REFERENCES.md s3)
    return f".model JN NJF (VTO={vto:g} BETA={beta:.10g} LAMBDA={lam:g} IS=1e-14)"


def jfet_source(name: str, vto: float, idss: float, lam: float, rs: float) -> Part:
    """An n-channel JFET with its gate on the cathode and RS from source to cathode."""
    return Part(name, f"{jfet_model(vto, idss, lam)}\nJ1 anode 0 src JN\nRS1 src 0 {rs:g}")


def jfet_source_with_diode(name: str, vto: float, idss: float, lam: float, rs: float) -> Part:
    """The same behind a series blocking diode (IS 1e-14, n 1), anode side."""
    elements = (
        f"{jfet_model(vto, idss, lam)}\n.model DB D (IS=1e-14)\n"
        f"D1 anode drain DB\nJ1 drain 0 src JN\nRS1 src 0 {rs:g}"
    )
    return Part(name, elements)
