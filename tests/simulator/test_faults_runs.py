"""Each fault kind through the whole stack: what the driver raises and what a run of the sequencer
does with it. The simulator serves in this process over TCP; the driver reaches it through
pyvisa-py exactly as for a real instrument; a second connection reads the output state.

The rule every test checks: the run ends with a clear error (or a judged device), the device
that was being measured is stored as aborted with every point measured before the fault, and the
output is left off.
"""

from __future__ import annotations

import sqlite3
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

from instruments import Connection, connect
from instruments import transport as transport_module
from instruments.errors import InstrumentDisconnected, InstrumentTimeout, ReplyError, ScpiError
from instruments.transport import open_visa
from sequencer.bench.lotrun import run_lot
from sequencer.plan.make import make_plan
from sequencer.recipe.load import Recipe, load_recipe
from sequencer.store.runstore import RunStore
from simulator import ServerHandle, SimOptions, start_server
from simulator.faults import parse_fault

pytestmark = [pytest.mark.sim, pytest.mark.robustness]

TIMEOUT_S = 0.3
POINTS = 31  # 0..30 V in 1 V steps, one sweep per device
STATION = """station: fault-bench
instrument: {{resource: "{resource}", timeout: {timeout_ms} ms}}
tray: {{channels: 3}}
limits: {{max_voltage: 60 V, max_current: 10 mA, max_power: 300 mW}}
fixture: {{interlocked: true}}
"""
RECIPE = """product: FLC-1.8 fault test
lot: FK-FAULT
station: station.yaml
nplc: 1
steps:
  - sweep: {{name: iv, start: 0 V, stop: {stop} V, points: {points}, compliance: 5 mA}}
judge:
  slope_window: 4 V
  limits:
    regulated_current: {{min: 1.62 mA, max: 1.98 mA}}
"""


@dataclass
class Bench:
    server: ServerHandle
    recipe: Recipe
    folder: Path

    def connect(self) -> Connection:
        return connect(self.server.resource, timeout_s=TIMEOUT_S)

    def run(self, conn: Connection, name: str = "run") -> tuple[BaseException | None, Path]:
        """One run_lot on the connection; the error it ended with (or None) and its folder."""
        out = self.folder / name
        store = RunStore.create(out, {"started": "t0", "lot": self.recipe.lot})
        try:
            run_lot(self.recipe, make_plan(self.recipe), conn.smu, store, lambda done: None)
        except Exception as exc:
            return exc, out
        finally:
            store.finish("done", "t1")
        return None, out

    def output_on(self, wait_for_off_s: float = 2.0) -> bool:
        """OUTP? from a second connection (waiting a little for queued commands to land)."""
        probe = open_visa(self.server.resource, timeout_s=2.0)
        try:
            deadline = time.monotonic() + wait_for_off_s
            while probe.query("OUTP?") == "1" and time.monotonic() < deadline:
                time.sleep(0.02)
            return probe.query("OUTP?") == "1"
        finally:
            probe.close()


@pytest.fixture
def bench(tmp_path: Path) -> Iterator:
    servers: list[ServerHandle] = []

    def make(*faults: str, stop_v: float = 30.0, points: int = POINTS) -> Bench:
        options = SimOptions(
            clock="virtual", devices=3, spread=0.0, faults=tuple(map(parse_fault, faults))
        )
        server = start_server(options)
        servers.append(server)
        timeout_ms = round(TIMEOUT_S * 1000)
        station = STATION.format(resource=server.resource, timeout_ms=timeout_ms)
        (tmp_path / "station.yaml").write_text(station)
        (tmp_path / "recipe.yaml").write_text(RECIPE.format(stop=stop_v, points=points))
        return Bench(server, load_recipe(tmp_path / "recipe.yaml"), tmp_path)

    yield make
    for server in servers:
        server.stop()


def stored(out: Path) -> list[tuple[str, str, int, str]]:
    """(device, verdict, number of stored points, reasons) per device, in order."""
    db = sqlite3.connect(out / "results.sqlite")
    rows = db.execute(
        "SELECT d.device, d.verdict, COUNT(p.idx), d.reasons FROM device d "
        "LEFT JOIN point p ON p.device = d.device GROUP BY d.device ORDER BY d.device"
    ).fetchall()
    db.close()
    return [(device, verdict, count, reasons or "") for device, verdict, count, reasons in rows]


def points_in_step(out: Path) -> bool:
    """Every stored point was measured at its own programmed level (no stale replies)."""
    db = sqlite3.connect(out / "results.sqlite")
    worst = db.execute("SELECT MAX(ABS(level_V - voltage_V)) FROM point").fetchone()[0]
    db.close()
    return worst < 2e-3  # 40 sigma of the 50 uV voltage noise, far below the 1 V step


def test_late_reply_aborts_the_device_and_the_next_run_is_in_step(bench):
    # the 5th point of device 2. The delay is far beyond timeout + drain + probe (about 0.8 s
    # after the READ?), so the transport always takes a fresh link; at 0.8 s it was a race of
    # a few ms, and on losing it the old link's queued OUTP OFF landed in the middle of run 2.
    b = bench("late-reply:on=READ?,after=35,delay=2")
    with b.connect() as conn:
        error, out = b.run(conn)
        assert isinstance(error, InstrumentTimeout)
        assert "no complete reply within 0.3 s" in str(error)
        devices = stored(out)
        assert [d[:3] for d in devices] == [
            ("FK-FAULT-001", "pass", POINTS),
            ("FK-FAULT-002", "aborted", 4),  # the four points before the fault are kept
        ]
        # recovery: before its next query the transport drains, sends *IDN? and waits behind
        # the late reply for that answer; a new run on the same connection reads no stale reply
        again, out2 = b.run(conn, "again")
        assert again is None
        assert [d[1] for d in stored(out2)] == ["pass", "pass", "pass"]
        assert points_in_step(out) and points_in_step(out2)
    assert not b.output_on()


def test_a_reply_later_than_the_resync_wait_is_still_never_taken_for_an_answer(bench, monkeypatch):
    monkeypatch.setattr(transport_module, "RESYNC_WAIT_S", 0.4)
    b = bench("late-reply:on=READ?,after=3,delay=1.2")
    with b.connect() as conn:
        for _ in range(3):
            conn.smu.measure()
        with pytest.raises(InstrumentTimeout):
            conn.smu.measure()  # times out after 0.3 s
        with pytest.raises(InstrumentTimeout):
            conn.smu.output_is_on()  # its resync gives up at 0.4 s, 0.5 s before the reply
        time.sleep(1.0)  # the late reading and the first probe's answer arrive meanwhile
        assert conn.smu.output_is_on() is False  # neither is read as OUTP?'s answer
        assert conn.smu.identify().startswith("CCBENCH")


def test_no_reply_aborts_the_device(bench):
    b = bench("no-reply:on=READ?,after=40")
    with b.connect() as conn:
        error, out = b.run(conn)
        assert isinstance(error, InstrumentTimeout)
        assert [d[1:3] for d in stored(out)] == [("pass", POINTS), ("aborted", 9)]
        assert conn.smu.identify().startswith("CCBENCH,SIMULATED-SMU")  # back in step
    assert not b.output_on()


def test_close_mid_query_reports_the_lost_link_and_close_switches_off_on_a_new_one(bench):
    b = bench("close:on=READ?,after=20")
    conn = b.connect()
    error, out = b.run(conn)
    assert isinstance(error, InstrumentDisconnected)
    assert "closed the connection" in str(error)
    assert [d[1:3] for d in stored(out)] == [("aborted", 20)]
    assert b.output_on(wait_for_off_s=0)  # the instrument never heard the output-off
    conn.close()  # what `ccbench run` does on the way out: reconnect, then safe state
    assert not b.output_on()


def test_garbage_reply_is_a_reply_error_and_the_link_recovers(bench):
    b = bench("garbage:on=READ?,after=12")
    with b.connect() as conn:
        error, out = b.run(conn)
        assert isinstance(error, ReplyError)
        assert "READ?" in str(error)
        assert [d[1:3] for d in stored(out)] == [("aborted", 12)]
        again, out2 = b.run(conn, "again")
        assert again is None and points_in_step(out2)
    assert not b.output_on()


def test_error_on_a_level_is_caught_at_the_next_point(bench):
    b = bench("error:on=SOUR:VOLT,after=40,code=-222")
    with b.connect() as conn:
        error, out = b.run(conn)
        assert isinstance(error, ScpiError) and error.code == -222
        assert "injected fault on SOUR:VOLT" in str(error)
        devices = stored(out)
        # device 1 sent 37 levels (31 points, then 25, 20 ... 0 V ramping down), so the 41st is
        # device 2's 4th: refused, its reading is not stored, the 3 before it are
        assert [d[1:3] for d in devices] == [("pass", POINTS), ("aborted", 3)]
        assert points_in_step(out)
    assert not b.output_on()


def test_interlock_opening_mid_sweep_forces_the_output_off_and_stops_the_run(bench):
    b = bench("lid-open:on=point,after=45", stop_v=50.0, points=51)  # fires at 45 V
    with b.connect() as conn:
        error, out = b.run(conn)
        assert isinstance(error, ScpiError) and error.code == -300
        assert "interlock opened, output switched off" in str(error)
        assert [d[1:3] for d in stored(out)] == [("aborted", 45)]
        assert conn.smu.interlock_closed() is False
    assert not b.output_on(wait_for_off_s=0)


@pytest.mark.parametrize(
    ("kind", "reason"),
    [
        ("device-open", "non-monotonic: the current falls"),
        ("device-short", "short: compliance reached"),
    ],
)
def test_device_failing_mid_sweep_is_judged_and_the_run_goes_on(bench, kind, reason):
    b = bench(f"{kind}:on=point,channel=2,after=15")
    with b.connect() as conn:
        error, out = b.run(conn)
    assert error is None
    devices = stored(out)
    assert [d[1] for d in devices] == ["pass", "fail", "pass"]
    assert all(count == POINTS for _, _, count, _ in devices)
    assert devices[1][3].startswith(reason)  # the judge names what went wrong
    assert not b.output_on(wait_for_off_s=0)


def test_a_fault_armed_from_a_second_connection_at_a_chosen_phase(bench):
    b = bench()
    control = open_visa(b.server.resource, timeout_s=2.0)

    def after_each_device(done) -> None:
        if done.index == 0:  # between device 1 and 2: device 2 goes open at its 10th point
            control.write('SIM:FAUL "device-open:on=point,after=9"')

    with b.connect() as conn:
        store = RunStore.create(b.folder / "armed", {"started": "t0", "lot": b.recipe.lot})
        run_lot(b.recipe, make_plan(b.recipe), conn.smu, store, after_each_device)
        store.finish("completed", "t1")
    assert control.query("SIM:FAUL:FIR?") == "1"
    control.close()
    assert [d[1] for d in stored(b.folder / "armed")] == ["pass", "fail", "pass"]
