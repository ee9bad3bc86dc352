"""Part-by-part testing (`ccbench run RECIPE --part-by-part`): scan, insert, test, verdict, next.

Each loop: ask for a serial; decide under the recipe's retest policy whether the part may be
tested (sequencer.recipe.retest); wait for the part in the socket (sequencer.bench.prompts); measure it on
its socket's channel; judge, bin and store it (device = the serial, pass = the attempt); then
show the verdict big. Between parts the output is off (the runner switches it off after every
device), so quitting at the prompt leaves nothing on and everything stored.

Sockets: a serial keeps the channel it first got; a new serial takes the station's next tray
channel in order, wrapping round. A one-socket station (`tray: {channels: 1}`) tests every part
on channel 1. On the simulator the part "inserted" is the simulated device on that channel, so
serials meet the simulated lot in the order they are first scanned (the 21st new serial on a
20-channel tray meets device 1 again), and a retest meets the same device as before.
"""

from __future__ import annotations

import argparse
import sqlite3
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from rich.console import Console

from sequencer.bench.lotrun import RunSummary, aborted, skips
from sequencer.bench.prompts import (
    EnterKey,
    InterlockLid,
    Lid,
    NoHands,
    Quit,
    Scanner,
    SimulatedHands,
)
from sequencer.cli.verdictview import verdict_panel
from sequencer.judge.engine import Judgement, judge_curve, with_bin
from sequencer.model.errors import RecipeError
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.recipe.repeat import Repeat
from sequencer.recipe.retest import Attempt, admit, stands
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder, Smu
from sequencer.safety.rules import Guard
from sequencer.store.runstore import RunStore

PROMPT = "[bold]scan the next part[/] (or type quit)"
FLAG_HELP = (
    "test parts one at a time: scan or type each serial, put the part in and close the lid, "
    "read the verdict; retests follow the recipe's part_by_part section"
)


def manifest_extras(recipe: Recipe, args: argparse.Namespace, repeat: Repeat | None) -> dict:
    """The run record's `schedule` for part-by-part testing (which has no passes to repeat)."""
    if not args.part_by_part:
        return {}
    if repeat is not None:
        option = "--every/--for/--passes" if args.every or args.passes else "the recipe's repeat"
        raise RecipeError("command line", None, "--part-by-part", f"cannot be used with {option}")
    if len(recipe.station.instruments) > 1:
        problem = f"needs a station with one instrument ({recipe.station.file} names several)"
        raise RecipeError("command line", None, "--part-by-part", problem)
    return {"schedule": recipe.part_by_part.describe()}


@dataclass
class Parts:
    """Every part of the run so far: its attempts and its socket (tray channel)."""

    channels: tuple[int, ...]
    attempts: dict[str, list[Attempt]] = field(default_factory=dict)
    sockets: dict[str, int] = field(default_factory=dict)

    def socket(self, serial: str) -> int:
        if serial not in self.sockets:
            self.sockets[serial] = self.channels[len(self.sockets) % len(self.channels)]
        return self.sockets[serial]

    def add(self, serial: str, attempt: Attempt) -> None:
        self.attempts.setdefault(serial, []).append(attempt)


def stored_parts(db: sqlite3.Connection, run_id: int, channels: tuple[int, ...]) -> Parts:
    """The parts a resumed run holds already, so that retests count across sessions."""
    parts = Parts(channels)
    rows = db.execute(
        "SELECT device, pass, verdict, bin_class, standing, channel FROM device "
        "WHERE run_id = ? ORDER BY seq",
        (run_id,),
    )
    for serial, number, verdict, klass, standing, channel in rows:
        parts.add(serial, Attempt(int(number), verdict, klass or "", standing != 0))
        parts.sockets.setdefault(serial, int(channel))
    return parts


@dataclass
class PartBench:
    """What the loop works with: the run's recipe, plan, instrument, store and guard."""

    recipe: Recipe
    plan: Plan
    smu: Smu
    store: RunStore
    guard: Guard
    clock: Callable[[], float] = time.monotonic


def run_parts(
    station: PartBench, scanner: Scanner, lid: Lid, show: Callable[[object], None]
) -> RunSummary:
    """Test parts one by one until the operator quits; returns the count of attempts."""
    parts = stored_parts(station.store.db, station.store.run_id, station.plan.channels)
    summary = RunSummary(total=0)
    multi = len(station.plan.channels) > 1
    start = station.clock()
    while True:
        try:
            serial, attempt = _next_part(station, parts, scanner, show)
            socket = parts.socket(serial)
            lid.wait_for_part(serial, socket if multi else None)
        except Quit:
            break
        judgement = measure_part(station, parts, serial, socket, attempt, summary, show)
        show(verdict_panel(judgement, attempt, _standing_note(parts, serial)))
    summary.total, summary.seconds = summary.done, station.clock() - start
    summary.status = "completed"
    show(f"quit between parts: output off; {summary.done} tests stored in {station.store.folder}")
    return summary


def _next_part(
    station: PartBench, parts: Parts, scanner: Scanner, show: Callable[[object], None]
) -> tuple[str, int]:
    """The next serial that may be tested, and its attempt number; refusals are shown."""
    while True:
        serial = scanner.next_serial(PROMPT)
        admission = admit(parts.attempts.get(serial, []), station.recipe.part_by_part)
        if admission.allowed:
            show(f"{serial}: {admission.why}")
            return serial, admission.attempt
        show(f"[bold red]not tested:[/] {serial}: {admission.why}; set the part aside")


def measure_part(
    station: PartBench,
    parts: Parts,
    serial: str,
    channel: int,
    attempt: int,
    summary: RunSummary,
    show: Callable[[object], None],
) -> Judgement:
    """Measure, judge, bin and store one attempt. An attempt ended early is stored as aborted
    and shown; then the run goes on only after a device trip under `on_trip: skip`."""
    recipe, store = station.recipe, station.store
    recorder = Recorder()
    store.begin_pass(attempt)
    try:
        measure_device(station.smu, station.plan, channel, station.guard, recorder, station.clock)
    except BaseException as exc:
        judgement = with_bin(aborted(serial, exc), recipe.judge)
        _store(station, parts, serial, recorder, channel, attempt, judgement, summary)
        if not skips(exc, recipe):
            show(verdict_panel(judgement, attempt))
            raise
        return judgement
    curve = recorder.curve(serial, channel, station.plan)
    judgement = judge_curve(curve, recipe.judge)
    _store(station, parts, serial, recorder, channel, attempt, judgement, summary)
    return judgement


def _store(
    station: PartBench,
    parts: Parts,
    serial: str,
    recorder: Recorder,
    channel: int,
    attempt: int,
    judgement: Judgement,
    summary: RunSummary,
) -> None:
    before = parts.attempts.get(serial, [])
    policy = station.recipe.part_by_part
    stood = stands(before, judgement.verdict, judgement.bin_class, policy)
    curve = recorder.curve(serial, channel, station.plan)
    station.store.add_device(curve, judgement, {"standing": int(stood)})
    parts.add(serial, Attempt(attempt, judgement.verdict, judgement.bin_class, stood))
    summary.count(judgement)


def _standing_note(parts: Parts, serial: str) -> str:
    attempts = parts.attempts[serial]
    if len(attempts) == 1 or attempts[-1].standing:
        return ""
    kept = next(a for a in reversed(attempts) if a.standing)
    return f"the part's result stays attempt {kept.number} ({kept.verdict})"


def from_command_line(
    console: Console, station: PartBench, simulated: bool, write: Callable[[str], None]
) -> RunSummary:
    """`ccbench run --part-by-part`: serials from the terminal (or whatever feeds stdin), the
    lid from the interlock; on the simulator the lid is moved by `SimulatedHands` (`write`
    sends its SCPI)."""

    def say(item: object) -> None:
        console.print(item, soft_wrap=isinstance(item, str))  # panels keep their layout

    recipe = station.recipe
    console.print(recipe.part_by_part.describe(), soft_wrap=True)
    scanner = Scanner(sys.stdin.readline, say, recipe.part_by_part.serial_pattern)
    lid: Lid
    if recipe.station.interlocked_fixture:
        hands = SimulatedHands(write) if simulated else NoHands()
        lid = InterlockLid(station.smu.interlock_closed, say, hands)
    else:
        lid = EnterKey(sys.stdin.readline, say)
    return run_parts(station, scanner, lid, say)
