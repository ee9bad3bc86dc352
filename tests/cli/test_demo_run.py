"""The README's main job, end to end: a real `ccbench run` process reaching the simulator
through pyvisa-py over a real TCP socket, results in a real SQLite file."""

from __future__ import annotations

import csv
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from instruments.scpi import message_units

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory) -> tuple[subprocess.CompletedProcess[str], Path]:
    out = tmp_path_factory.mktemp("demo") / "run"
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", "recipes/demo.yaml", "--sim",
         "--out", str(out)],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip
    return done, out


@pytest.mark.sim
def test_demo_run_exits_0_and_lists_every_device(demo_run):
    done, out = demo_run
    assert done.returncode == 0, done.stdout + done.stderr
    with open(out / "devices.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["device"] for r in rows] == [f"FK2611-07-{c:03d}" for c in range(1, 21)]
    verdicts = {r["verdict"] for r in rows}
    assert verdicts == {"pass", "fail"}
    for r in rows:
        if r["verdict"] == "pass":
            assert 1.62e-3 <= float(r["regulated_current_A"]) <= 1.98e-3
            assert float(r["limiting_voltage_V"]) <= 3.5
            assert float(r["dynamic_impedance_ohm"]) >= 100e3
        else:
            assert r["reasons"]
    assert "This session" in done.stdout and "lot yield: " in done.stdout
    assert "hazardous voltage" in done.stdout.lower()


@pytest.mark.sim
def test_store_holds_run_devices_and_raw_points(demo_run):
    _, out = demo_run
    db = sqlite3.connect(out / "results.sqlite")
    status, identity, digest, resource = db.execute(
        "SELECT status, identity, recipe_sha256, resource FROM run"
    ).fetchone()
    assert status == "completed"
    assert identity.startswith("CCBENCH,SIMULATED-SMU,")
    assert len(digest) == 64
    assert resource.startswith("TCPIP0::127.0.0.1::") and resource.endswith("::SOCKET")
    assert db.execute("SELECT COUNT(*) FROM device").fetchone()[0] == 20
    # 81 sweep points and 5 spot repeats per device
    assert db.execute("SELECT COUNT(*) FROM point").fetchone()[0] == 20 * 86
    journal = (out / "journal.jsonl").read_text().splitlines()
    assert len(journal) == 20


@pytest.mark.sim
def test_scpi_log_traces_every_exchange(demo_run):
    _, out = demo_run
    lines = (out / "scpi.log").read_text().splitlines()
    messages = [ln.split("\t")[3] for ln in lines if ln.split("\t")[2] == ">>"]
    sent = [unit for m in messages for unit in message_units(m)]  # command by command
    assert sent[0] == "*IDN?"
    assert sent.count("READ?") == sent.count("STAT:QUES:COND?") == 20 * 86
    # each level goes out with its reading: one exchange a point
    assert sum(m.startswith("SOUR:VOLT ") and ";:READ?" in m for m in messages) == 20 * 86
    # the output is switched off after every device and the channel is chosen before it
    assert sent.count("OUTP OFF") >= 20
    assert "ROUT:CLOS (@20)" in sent
