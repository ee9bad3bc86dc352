"""Faults seen by a user: `ccbench run` as a separate program, against a faulty simulator.

One run talks to a simulator served by this test (so a second connection can read the output
state afterwards); one arms the faults from the station file's `simulator:` section and lets
`--sim` start the embedded simulator with them.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from instruments.transport import open_visa
from simulator import SimOptions, start_server
from simulator.faults import parse_fault

ROOT = Path(__file__).resolve().parents[2]
pytestmark = [pytest.mark.sim, pytest.mark.robustness]

STATION = """station: fault-bench
instrument: {{resource: "{resource}", timeout: 300 ms}}
tray: {{channels: 3}}
limits: {{max_voltage: 60 V, max_current: 10 mA, max_power: 300 mW}}
fixture: {{interlocked: true}}
simulator:
  clock: virtual
  faults:
    - {{kind: no-reply, on: "READ?", after: 40}}
"""
RECIPE = """product: FLC-1.8 fault test
lot: FK-FAULT
station: station.yaml
nplc: 1
hazardous_voltage: acknowledged
steps:
  - sweep: {{name: iv, start: 0 V, stop: {stop} V, points: {points}, compliance: 5 mA}}
judge:
  slope_window: 4 V
"""


def ccbench(folder: Path, *extra: str, stop_v: int = 30) -> subprocess.CompletedProcess[str]:
    (folder / "recipe.yaml").write_text(RECIPE.format(stop=stop_v, points=stop_v + 1))
    command = [sys.executable, "-m", "sequencer.cli", "run", str(folder / "recipe.yaml")]
    return subprocess.run(
        [*command, "--out", str(folder / "run"), *extra],
        cwd=ROOT, capture_output=True, text=True, timeout=120,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def journal(folder: Path) -> list[dict]:
    lines = (folder / "run" / "journal.jsonl").read_text().splitlines()
    return [json.loads(line) for line in lines]


def one_error_line(done: subprocess.CompletedProcess[str]) -> str:
    lines = [line for line in done.stderr.splitlines() if line.startswith("ccbench:")]
    assert len(lines) == 1 and "Traceback" not in done.stdout + done.stderr
    return lines[0]


@pytest.mark.parametrize(
    ("fault", "stop_v", "exit_code", "says", "kept"),
    [
        # 31 readings of device 1, then 9 of device 2 before the 41st READ? drops the link
        ("close:on=READ?,after=40", 30, 4, "instrument: the instrument closed the connection", 9),
        # the opening safe state and device 1 (51 levels, a 10-step ramp down) send 62 levels:
        # the lid opens at device 2's 40th (39 V, still touch-safe, so nothing is forced off);
        # the guard reads the interlock before the first level above 42 V and refuses it
        ("lid-open:on=SOUR:VOLT,after=101", 50, 3, "refused 43 V: the fixture interlock", 43),
    ],
)
def test_run_ends_with_one_clear_line_and_the_output_off(
    tmp_path: Path, fault: str, stop_v: int, exit_code: int, says: str, kept: int
):
    server = start_server(SimOptions(clock="virtual", devices=3, faults=(parse_fault(fault),)))
    try:
        (tmp_path / "station.yaml").write_text(STATION.format(resource=server.resource))
        done = ccbench(tmp_path, stop_v=stop_v)
        assert done.returncode == exit_code, done.stdout + done.stderr
        assert one_error_line(done).startswith(f"ccbench: {says}")
        devices = journal(tmp_path)
        assert [d["verdict"] for d in devices] == ["pass", "aborted"]
        assert len(devices[1]["points"]["voltage_V"]) == kept  # measured before the fault
        probe = open_visa(server.resource, timeout_s=2.0)
        assert probe.query("OUTP?") == "0"
        probe.close()
    finally:
        server.stop()


def test_faults_from_the_station_file_reach_the_embedded_simulator(tmp_path: Path):
    (tmp_path / "station.yaml").write_text(STATION.format(resource="sim"))
    done = ccbench(tmp_path, "--sim")
    assert done.returncode == 4, done.stdout + done.stderr
    assert "no complete reply within 0.3 s" in one_error_line(done)
    devices = journal(tmp_path)
    assert [d["verdict"] for d in devices] == ["pass", "aborted"]
    assert len(devices[1]["points"]["voltage_V"]) == 9
    manifest = json.loads(
        __import__("sqlite3").connect(tmp_path / "run" / "results.sqlite")
        .execute("SELECT simulator FROM run").fetchone()[0]
    )  # fmt: skip
    assert manifest["faults"] == [{"kind": "no-reply", "on": "READ?", "after": 40}]
