"""The run-time guard in whole runs on the simulator (in process, same SCPI text): readings over
power or rating, clamping where a step must not, a lid opened mid-sweep, an unreadable
interlock. Each trip leaves the output off, the device stored as aborted with the reason, and
the run stopped or going on as `on_trip` says."""

from __future__ import annotations

import csv
import dataclasses
from pathlib import Path

import pytest
from rich.console import Console

import instruments
from instruments import load_dialect
from instruments.scpi import message_units
from sequencer.cli.main import main
from simulator.devices import Resistor, short_circuit
from simulator.instrument import Instrument
from tests.safety.bench import SET_VOLTAGE, LoopBench, loop_bench, write_bench


def put_device(inst: Instrument, channel: int, device, kind: str = "short") -> None:
    """Behind the wire: the part in tray position `channel` becomes `device`."""
    lot = inst.lot
    devices = list(lot.devices)
    devices[channel - 1] = dataclasses.replace(devices[channel - 1], kind=kind, device=device)
    inst.lot = lot.with_devices(tuple(devices))


def run_loop(tmp_path: Path, monkeypatch, bench: LoopBench, *args: str, **keys):
    path = write_bench(tmp_path, **keys)
    monkeypatch.setattr(instruments, "connect", lambda *a, **k: bench.connection())
    console = Console(record=True, width=300, highlight=False)
    out = tmp_path / "run"
    code = main(["run", str(path), "--out", str(out), *args], console=console)
    return code, console.export_text(), read_rows(out)


def read_rows(out: Path) -> list[dict[str, str]]:
    if not (out / "devices.csv").exists():
        return []
    with open(out / "devices.csv", newline="") as f:
        return list(csv.DictReader(f))


def assert_output_off(bench: LoopBench) -> None:
    second = bench.session.__class__(bench.instrument)  # an independent session
    assert second.handle("OUTP?") == "0"


STEPS_NO_CLAMP = [
    {"sweep": {"name": "iv", "start": "0 V", "stop": "30 V", "points": 16, "compliance": "5 mA"}},
    {"spot": {"name": "at-test-voltage", "voltage": "25 V", "compliance": "5 mA",
              "on_compliance": "trip"}},
]  # fmt: skip


@pytest.mark.parametrize("policy", ["stop", "skip"])
def test_clamping_where_a_step_must_not_trips_and_follows_on_trip(tmp_path, monkeypatch, policy):
    bench = loop_bench()
    put_device(bench.instrument, 2, short_circuit())
    code, text, rows = run_loop(
        tmp_path, monkeypatch, bench, recipe={"steps": STEPS_NO_CLAMP, "on_trip": policy}
    )
    assert rows[0]["verdict"] != "aborted"
    assert rows[1]["verdict"] == "aborted"
    assert "step 'at-test-voltage': in compliance at" in rows[1]["reasons"]
    assert "must not clamp (on_compliance: trip)" in rows[1]["reasons"]
    if policy == "skip":
        assert code == 0, text
        assert [r["device"] for r in rows] == ["FK2611-99-001", "FK2611-99-002", "FK2611-99-003"]
    else:
        assert code == 3
        assert len(rows) == 2
        last = text.strip().splitlines()[-1]
        assert last.startswith("ccbench: step 'at-test-voltage': in compliance")
        assert last.endswith("output off (read back from the instrument)")
    assert_output_off(bench)


def test_clamped_points_in_a_flag_step_are_flagged_not_data(tmp_path, monkeypatch):
    bench = loop_bench()
    put_device(bench.instrument, 1, short_circuit())
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    assert code == 0, text
    assert rows[0]["verdict"] == "fail" and rows[0]["classification"] == "short"
    assert rows[0]["regulated_current_A"] == ""  # no figure from clamped readings


def test_a_reading_over_the_rated_dissipation_trips_the_device(tmp_path, monkeypatch):
    bench = loop_bench()
    put_device(bench.instrument, 1, Resistor(5e3), kind="low-ohm")  # 4.8 mA at 24 V: 115 mW
    ratings = {"max_dissipation": "100 mW", "worst_case_current": "2 mA"}
    code, text, rows = run_loop(
        tmp_path, monkeypatch, bench, recipe={"ratings": ratings, "on_trip": "skip"}
    )
    assert code == 0, text
    assert rows[0]["verdict"] == "aborted"
    assert "exceeds the device's rated dissipation 100 mW" in rows[0]["reasons"]
    assert rows[1]["verdict"] != "aborted"
    assert_output_off(bench)


def test_an_instrument_that_does_not_hold_its_limit_stops_the_run(tmp_path, monkeypatch):
    bench = loop_bench()
    real = bench.handler

    def overshoot(message: str):
        reply = real(message)
        if "READ?" in message_units(message) and reply:
            pair, *rest = reply.split(";")
            volts = pair.split(",")[0]
            return ";".join([f"{volts},+9.000000E-03", *rest])  # 9 mA against 5 mA compliance
        return reply

    bench.handler = overshoot
    code, text, rows = run_loop(tmp_path, monkeypatch, bench, recipe={"on_trip": "skip"})
    assert code == 3  # a bench fault stops the run even under on_trip: skip
    assert len(rows) == 1 and rows[0]["verdict"] == "aborted"
    assert "did not hold its current limit" in text.strip().splitlines()[-1]
    assert_output_off(bench)


HAZARD = {
    "steps": [{"sweep": {"name": "iv", "start": "0 V", "stop": "55 V", "points": 12,
                         "compliance": "2 mA"}}],
    "hazardous_voltage": "acknowledged",
}  # fmt: skip


def test_a_lid_opened_mid_sweep_stops_at_the_next_hazardous_level(tmp_path, monkeypatch):
    bench = loop_bench()
    real, seen = bench.handler, []

    def lid_opens(message: str):
        reply = real(message)
        levels = [float(m.group(1)) for u in message_units(message) if (m := SET_VOLTAGE.match(u))]
        if 40.0 in levels and not seen:
            seen.append(message)
            bench.session.handle("SIM:LID OPEN")  # the operator lifts the lid at 40 V
        return reply

    bench.handler = lid_opens
    code, _, rows = run_loop(tmp_path, monkeypatch, bench, recipe=HAZARD)
    assert seen and code == 3
    assert "refused 45 V: the fixture interlock reads open" in rows[0]["reasons"]
    assert len(rows) == 1  # an interlock trip always stops the run
    assert max(bench.levels_sent()) == 40.0  # 45 V was refused by the guard, never sent
    assert_output_off(bench)


def test_a_hazardous_run_with_the_lid_open_is_refused_before_any_level(tmp_path, monkeypatch):
    bench = loop_bench()
    bench.session.handle("SIM:LID OPEN")
    code, text, rows = run_loop(tmp_path, monkeypatch, bench, recipe=HAZARD)
    assert code == 3
    assert "the fixture interlock reads open: close the lid" in text
    assert rows == [] and bench.instrument.smu.applied_levels == []


def test_an_interlock_the_dialect_cannot_read_never_counts_as_closed(tmp_path, monkeypatch):
    bench = loop_bench()
    dialect = dataclasses.replace(load_dialect("scpi1999"), interlock_query=None)
    make = bench.connection

    def connection():
        conn = make()
        conn.smu.dialect = dialect
        return conn

    bench.connection = connection
    code, text, _ = run_loop(tmp_path, monkeypatch, bench, recipe=HAZARD)
    assert code == 3
    assert "interlock cannot be read" in text
    assert bench.instrument.smu.max_applied_v() == 0.0


@pytest.mark.parametrize("where", ["recipe", "command line", "nowhere needed"])
def test_the_run_record_says_who_allowed_hazardous_levels(tmp_path, monkeypatch, where):
    import json

    steps = HAZARD["steps"] if where != "nowhere needed" else STEPS_NO_CLAMP[:1]
    recipe = {"steps": steps}
    args: tuple[str, ...] = ()
    if where == "recipe":
        recipe["hazardous_voltage"] = "acknowledged"
    elif where == "command line":
        args = ("--allow-hazardous-voltage",)
    code, text, _ = run_loop(tmp_path, monkeypatch, loop_bench(), *args, recipe=recipe)
    assert code == 0, text
    recorded = json.loads((tmp_path / "run" / "manifest.json").read_text())["hazardous_voltage"]
    expected = {
        "recipe": f"acknowledged in the recipe ({tmp_path / 'recipe.yaml'})",
        "command line": "acknowledged on the command line (--allow-hazardous-voltage)",
        "nowhere needed": None,
    }
    assert recorded == expected[where]
