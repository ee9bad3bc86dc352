"""The run folder: journal first, then SQLite, then CSV; nothing earlier lost on a failure."""

from __future__ import annotations

import csv
import json
import sqlite3

import numpy as np
import pytest

from sequencer.judge.engine import judge_curve
from sequencer.model.curve import Curve
from sequencer.model.errors import StoreError
from sequencer.model.judgesettings import FigureLimit, JudgeSettings
from sequencer.store.runstore import RUN_CSV_COLUMNS, SCHEMA_VERSION, RunStore

SETTINGS = JudgeSettings(limits=(FigureLimit("dynamic_impedance", 1e5, None),))


def _curve(name, r_ohm):
    v = np.linspace(0, 40, 41)
    i = v / r_ohm
    i[5] = np.inf  # an over-range reading must survive the journal (as the text 'inf')
    return Curve.from_sweep(name, v, i)


def test_results_in_journal_sqlite_and_csv(tmp_path):
    store = RunStore.create(tmp_path / "run", {"started": "t0", "lot": "FK-TEST"})
    for name, r in (("a", 47e3), ("b", 220e3)):
        c = _curve(name, r)
        store.add_device(
            c, judge_curve(Curve.from_sweep(name, c.voltage_v, c.voltage_v / r), SETTINGS)
        )
    store.finish("completed", "t1")

    lines = (tmp_path / "run" / "journal.jsonl").read_text().splitlines()
    entries = [json.loads(x) for x in lines]
    assert [e["device"] for e in entries] == ["a", "b"]
    assert entries[0]["points"]["current_A"][5] == "inf"

    db = sqlite3.connect(tmp_path / "run" / "results.sqlite")
    assert db.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert db.execute("SELECT status, lot FROM run").fetchone() == ("completed", "FK-TEST")
    rows = db.execute("SELECT device, verdict, dynamic_impedance_ohm FROM device ORDER BY device")
    (_, va, za), (_, vb, zb) = rows.fetchall()
    assert (va, vb) == ("fail", "pass")
    assert za == pytest.approx(47e3) and zb == pytest.approx(220e3)
    assert db.execute("SELECT COUNT(*) FROM point").fetchone()[0] == 82
    stored = db.execute("SELECT current_A FROM point WHERE device = 'a' AND idx = 5")
    assert stored.fetchone()[0] == np.inf

    with open(tmp_path / "run" / "devices.csv", newline="") as f:
        table = list(csv.DictReader(f))
    assert list(table[0]) == RUN_CSV_COLUMNS
    assert [r["round"] for r in table] == ["1", "1"]
    assert table[0]["verdict"] == "fail" and "below min" in table[0]["reasons"]
    for col in (
        "regulated_current_A",
        "limiting_voltage_V",
        "dynamic_impedance_ohm",
        "knee_impedance_ohm",
        "regulated_current_u_A",
        "dynamic_impedance_u_ohm",
    ):
        assert col in table[0]


@pytest.mark.robustness
def test_refuses_a_folder_that_holds_a_run(tmp_path):
    store = RunStore.create(tmp_path / "run", {"started": "t0"})
    store.set_identity("TCPIP0::127.0.0.1::5025::SOCKET", "TEST,SMU,1,1")  # it reached one
    store.finish("completed", "t1")
    with pytest.raises(StoreError, match="already holds a run"):
        RunStore.create(tmp_path / "run", {"started": "t0"})
