"""An instrument that answers SCPI's "not a number" (9.91E37) or +INF (9.9E37) for a reading:
a real `ccbench run` process, through pyvisa-py over TCP, against a small responder written
from a description (nan_smu.py). The run must stop with a non-zero exit and one line naming
the reading, with the output off and read back, and the device stored as aborted with that
reason; never a completed run with the reading stored as data."""

from __future__ import annotations

import sqlite3
import subprocess
import sys

import pytest

from tests.safety.bench import ROOT, read_output, write_bench
from tests.safety.nan_smu import NanSmu

STEPS = [
    {"sweep": {"name": "iv", "start": "0 V", "stop": "30 V", "points": 16, "compliance": "5 mA"}},
]  # fmt: skip
GOOD = 20  # the first device's 16 readings are good; the second device's fifth is not


@pytest.fixture
def responder(request):
    server = NanSmu(GOOD, request.param)
    yield server
    server.close()


def run_cli(tmp_path, resource: str, lists: bool) -> subprocess.CompletedProcess[str]:
    station = {"instrument": {"resource": resource, "timeout": "1 s"}}
    path = write_bench(tmp_path, station=station, recipe={"steps": STEPS, "lists": lists})
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", str(path), "--out", str(tmp_path / "run")],
        cwd=ROOT, capture_output=True, text=True, timeout=120,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "300", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


# SCPI-1999 Vol 1 7.2.1.4-7.2.1.5 (SCPI.md s6): 9.91E37 is NaN, 9.9E37 is +INF.
CODES = [("9.91E37", "as not a number (SCPI NaN, 9.91E37)"), ("9.9E37", "as +infinite")]


@pytest.mark.sim
@pytest.mark.robustness
@pytest.mark.parametrize(("responder", "words"), CODES, indirect=["responder"])
@pytest.mark.parametrize("lists", [False, True], ids=["point-by-point", "list-block"])
def test_a_reading_that_is_not_a_number_stops_the_run_with_the_output_off(
    tmp_path, responder, words, lists
):
    done = run_cli(tmp_path, responder.resource, lists)
    assert done.returncode == 3, done.stdout + done.stderr
    last = done.stderr.strip().splitlines()[-1]  # errors: stderr when piped
    assert words in last and last.endswith("output off (read back from the instrument)"), last
    assert "Traceback" not in done.stderr
    assert read_output(responder.resource) == "0"  # a second connection asks the instrument
    assert not responder.state.output_on
    if lists:  # the readings came back as one binary block (float32), decoded there
        assert any("FORM REAL,32" in m for m in responder.received)
    db = sqlite3.connect(tmp_path / "run" / "results.sqlite")
    rows = db.execute("SELECT device, verdict, reasons FROM device ORDER BY channel").fetchall()
    assert len(rows) == 2 and rows[0][1] != "aborted", rows  # the run went no further
    assert rows[1][1] == "aborted"
    assert words in rows[1][2]
    assert db.execute("SELECT status FROM run").fetchone()[0] != "completed"
