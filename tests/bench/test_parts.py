"""Part-by-part testing driven by a script: serials as a scanner types them, the lid moved by
simulated hands or by a second connection, duplicates, a retest, quitting between parts."""

from __future__ import annotations

import io
import sqlite3
import threading
import time
from pathlib import Path

import pytest
from rich.console import Console

from instruments.dialect import load_dialect
from instruments.loopback import CallableTransport
from instruments.smu import ScpiSmu
from sequencer.bench.lotrun import make_guard
from sequencer.bench.parts import PartBench, run_parts
from sequencer.bench.prompts import InterlockLid, Scanner, SimulatedHands
from sequencer.cli.partcmd import render
from sequencer.plan.make import make_plan
from sequencer.recipe.load import load_recipe
from sequencer.store.runstore import RunStore
from simulator.devices import open_circuit
from simulator.options import SimOptions, build_instrument
from simulator.session import Session
from tests.support.stations import write_recipe, write_station

POLICY = "part_by_part: {retests: 1, serial_pattern: 'FK2611-07-[0-9]{4}'}"


class Bench:
    """A simulated station in this process: the SMU on one connection, the operator's hands
    (and the test's own look at the instrument) on others."""

    def __init__(self, tmp_path: Path, extra: str = POLICY, channels: int = 6) -> None:
        station = write_station(tmp_path / "recipes", channels=channels)
        self.recipe = load_recipe(write_recipe(tmp_path / "recipes", station, extra=extra))
        options = self.recipe.station.simulator_options
        sim = SimOptions(seed=int(options["seed"]), devices=channels, spread=0.3, clock="virtual")
        self.instrument = build_instrument(sim)
        self.smu = ScpiSmu(
            CallableTransport(Session(self.instrument).handle), load_dialect("scpi1999")
        )
        self.look = Session(self.instrument).handle
        self.plan = make_plan(self.recipe)
        manifest = {"started": "2026-05-04T06:00:00.000+00:00", "lot": self.recipe.lot}
        self.store = RunStore.create(tmp_path / "run", manifest)
        self.shown: list[object] = []

    def tester(self) -> PartBench:
        return PartBench(
            self.recipe, self.plan, self.smu, self.store, make_guard(self.recipe, self.smu)
        )

    def scanner(self, lines: list[str]) -> Scanner:
        feed = iter(lines)
        return Scanner(
            lambda: next(feed, ""), self.shown.append, self.recipe.part_by_part.serial_pattern
        )

    def rows(self) -> list[tuple]:
        self.store.finish("completed", "2026-05-04T07:00:00.000+00:00")
        db = sqlite3.connect(self.store.folder / "results.sqlite")
        rows = db.execute(
            "SELECT device, round, channel, verdict, hard_bin, standing FROM device ORDER BY seq"
        ).fetchall()
        db.close()
        return rows

    def text(self) -> str:
        console = Console(width=100, record=True, color_system=None, file=io.StringIO())
        for item in self.shown:
            console.print(render(item))
        return console.export_text()


def test_scanned_parts_a_duplicate_a_retest_and_quit(tmp_path):
    bench = Bench(tmp_path)
    bench.look('SIM:FAUL "device-open:channel=2,on=point"')  # the second part is open
    hands = SimulatedHands(bench.look)
    lid = InterlockLid(bench.smu.interlock_closed, bench.shown.append, hands, sleep=lambda s: None)
    script = [
        "FK2611-07-0001\n",
        "FK2611-07-0002\n",
        "FK2611-07-0001\n",  # scanned again after it passed: a duplicate
        "\n",  # a stray Enter is no serial
        "FK2611-07-0002\n",  # failed: its one retest
        "FK2611-07-0002\n",  # no retest left
        "FK2611-07-0004 FK2611-07-0005\n",  # two codes in one scan
        "FK2611-08-0001\n",  # not one of this recipe's serials
        "\x02FK2611-07-0003\x03\r\n",  # a scanner's start and end characters are dropped
        "quit\n",
    ]
    summary = run_parts(bench.tester(), bench.scanner(script), lid, bench.shown.append)

    assert summary.done == 4 and summary.passed == 2 and summary.failed == 2
    assert bench.rows() == [
        ("FK2611-07-0001", 1, 1, "pass", 1, 1),
        ("FK2611-07-0002", 1, 2, "fail", 3, 1),
        ("FK2611-07-0002", 2, 2, "fail", 3, 1),  # the same part, back in its socket
        ("FK2611-07-0003", 1, 3, "pass", 1, 1),
    ]
    assert hands.moves == ["SIM:LID OPEN", "SIM:LID CLOS"] * 4  # one lid cycle per test
    assert bench.look("OUTP?") == "0"  # quit between parts: the output is off
    text = bench.text()
    assert "not tested: FK2611-07-0001: duplicate: passed already (attempt 1, pass)" in text
    assert "not tested: FK2611-07-0002: tested 2 times; no retest left (retests: 1)" in text
    assert "'FK2611-08-0001' does not match this recipe's serials" in text
    assert "holds a space (two codes in one scan?)" in text
    assert "FK2611-07-0002: retest 1 of 1" in text
    assert "quit between parts: output off; 4 tests stored" in text


def test_the_test_waits_for_the_lid_opened_and_closed_by_someone_else(tmp_path):
    """The hands are a second connection in another thread, slow on purpose: nothing is
    measured before the lid has been opened (old part out) and closed again (new part in)."""
    bench = Bench(tmp_path)
    events: list[str] = []
    smu_select = bench.smu.select_channel

    def select(channel: int) -> None:
        events.append(f"measure {channel}")
        smu_select(channel)

    bench.smu.select_channel = select  # type: ignore[method-assign]

    def operator_hands() -> None:
        for _ in range(2):
            time.sleep(0.05)
            bench.look("SIM:LID OPEN")
            events.append("lid open")
            time.sleep(0.05)
            events.append("lid closed")
            bench.look("SIM:LID CLOS")
            while bench.look("ROUT:CLOS:STAT?") == "(@)" or bench.look("OUTP?") == "1":
                time.sleep(0.01)  # wait until that part is measured before the next one
            time.sleep(0.05)

    hands = threading.Thread(target=operator_hands)
    hands.start()
    lid = InterlockLid(bench.smu.interlock_closed, bench.shown.append, poll_s=0.005)
    scanner = bench.scanner(["FK2611-07-0005\n", "FK2611-07-0006\n", ""])
    run_parts(bench.tester(), scanner, lid, bench.shown.append)
    hands.join()
    assert events == ["lid open", "lid closed", "measure 1"] * 1 + [
        "lid open",
        "lid closed",
        "measure 2",
    ]
    assert [row[:2] for row in bench.rows()] == [("FK2611-07-0005", 1), ("FK2611-07-0006", 1)]


@pytest.mark.parametrize(
    ("policy", "verdicts", "standing"),
    [
        ("{retests: 2, result: last}", ["fail", "fail", "pass"], [1, 1, 1]),
        ("{retests: 2, result: first}", ["fail", "fail", "pass"], [1, 0, 0]),
        ("{retests: 2, result: best}", ["fail", "pass"], [1, 1]),
        ("{retests: 0, retest_passed: true}", ["pass"], [1]),
        ("{retests: 1, retest_passed: true, result: best}", ["pass", "fail"], [1, 0]),
    ],
)
def test_which_attempt_stands_is_stored_with_every_attempt(tmp_path, policy, verdicts, standing):
    """The part sits badly in the socket (an open circuit) for its failing tests and is seated
    properly for its passing one."""
    bench = Bench(tmp_path, extra=f"part_by_part: {policy}")
    lid = InterlockLid(
        bench.smu.interlock_closed, bench.shown.append, SimulatedHands(bench.look), lambda s: None
    )
    seated = iter([v != "fail" for v in verdicts] + [True])

    def scan() -> str:  # one more scan than the policy allows, then quit
        well = next(seated, None)
        if well is None:
            return "q\n"
        if well:
            bench.instrument.replaced.pop(1, None)
        else:
            bench.instrument.replaced[1] = open_circuit()
        return "FK2611-07-0100\n"

    scanner = Scanner(scan, bench.shown.append)
    run_parts(bench.tester(), scanner, lid, bench.shown.append)
    rows = bench.rows()
    assert [r[3] for r in rows] == verdicts and [r[5] for r in rows] == standing
    assert "not tested: FK2611-07-0100" in bench.text()  # the scan beyond the allowance
