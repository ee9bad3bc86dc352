"""A real `ccbench run` process, a real standalone simulator, a real signal mid-sweep: the
output ends off (read by a second connection of our own), what was measured is kept, and the
exit code is non-zero with one line saying why."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from tests.safety.bench import ROOT, read_output, start_sim_process, write_bench

SLOW_STEPS = [
    {"sweep": {"name": "iv", "start": "0 V", "stop": "30 V", "points": 61, "compliance": "5 mA",
               "settle": "5 ms"}},
]  # fmt: skip


@pytest.fixture
def sim():
    process = start_sim_process("--devices", "6", "--seed", "7")
    yield process
    process.stop()


def wait_for(condition, timeout_s: float) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.02)
    return False


def lines(path) -> int:
    return len(path.read_text().splitlines()) if path.exists() else 0


SIGNALS = [
    (signal.SIGINT, "Ctrl-C"),
    (signal.SIGTERM, "SIGTERM"),
    (signal.SIGHUP, "SIGHUP"),  # the terminal closed, an SSH session dropped
    (signal.SIGQUIT, "SIGQUIT"),  # Ctrl-\ at the terminal
]


@pytest.mark.sim
@pytest.mark.robustness
@pytest.mark.parametrize(("signum", "why"), SIGNALS)
def test_a_signal_mid_sweep_leaves_the_output_off_and_keeps_the_data(tmp_path, sim, signum, why):
    station = {"instrument": {"resource": sim.resource, "timeout": "2 s"},
               "tray": {"channels": 6}}  # fmt: skip
    path = write_bench(tmp_path, station=station, recipe={"steps": SLOW_STEPS, "nplc": 1})
    out = tmp_path / "run"
    run = subprocess.Popen(
        [sys.executable, "-m", "sequencer.cli", "run", str(path), "--out", str(out)],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "300", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip
    try:
        assert wait_for(lambda: lines(out / "journal.jsonl") >= 1, 30), "no device finished"
        # into the second device's sweep: the output really is on (polled, since a loaded
        # machine may still be between devices a moment after the first journal line)
        assert wait_for(lambda: read_output(sim.resource) == "1", 10), "output never on"
        time.sleep(0.2)  # a few of its 25 ms points in, well before its 61st
        run.send_signal(signum)
        stdout, stderr = run.communicate(timeout=20)
    finally:
        run.kill()
    assert run.returncode == 130, stdout + stderr
    last = stderr.strip().splitlines()[-1]  # the error line: stderr when piped
    assert last.startswith(f"ccbench: stopped by {why}; output off (read back from the instrument)")
    assert "what was measured is kept in" in last
    assert "Traceback" not in stderr
    assert read_output(sim.resource) == "0"  # a second, independent connection
    db = sqlite3.connect(out / "results.sqlite")
    assert db.execute("SELECT status FROM run").fetchone()[0] == "interrupted"
    ended = db.execute("SELECT status, ended FROM session").fetchone()
    assert ended == ("interrupted", last.removeprefix("ccbench: "))  # the record says how
    verdicts = db.execute("SELECT verdict, reasons FROM device ORDER BY channel").fetchall()
    assert len(verdicts) >= 2 and verdicts[-1][0] == "aborted"
    assert why in verdicts[-1][1] or "operator" in verdicts[-1][1]
    partial = db.execute(
        "SELECT COUNT(*) FROM point WHERE device = (SELECT MAX(device) FROM device)"
    ).fetchone()[0]
    assert 0 < partial < 61  # the interrupted device keeps the points it had
    assert lines(out / "journal.jsonl") == len(verdicts)


@pytest.mark.sim
@pytest.mark.robustness
def test_ctrl_c_at_the_terminal_does_not_stop_the_embedded_simulator_first(tmp_path):
    # A terminal sends Ctrl-C's SIGINT to its whole foreground process group (POSIX job
    # control, common practice, no source): ccbench and every child it started. The embedded
    # simulator must outlive it long enough for the output-off and its read-back.
    path = write_bench(tmp_path, recipe={"steps": SLOW_STEPS, "nplc": 1})
    out = tmp_path / "run"
    run = subprocess.Popen(
        [sys.executable, "-m", "sequencer.cli", "run", str(path), "--sim", "--out", str(out)],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "300", "PYTHONPATH": str(ROOT)},
        start_new_session=True,  # its own group, standing in for the terminal's foreground group
    )  # fmt: skip
    try:
        assert wait_for(lambda: lines(out / "journal.jsonl") >= 1, 30), "no device finished"
        time.sleep(0.3)
        os.killpg(run.pid, signal.SIGINT)  # the whole group, as the terminal does
        stdout, stderr = run.communicate(timeout=20)
    finally:
        run.kill()
    assert run.returncode == 130, stdout + stderr
    last = stderr.strip().splitlines()[-1]  # the error line: stderr when piped
    assert last.startswith("ccbench: stopped by Ctrl-C; output off (read back from the instrument)")
