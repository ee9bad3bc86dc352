"""Part-by-part testing (`ccbench run RECIPE --part-by-part`): scan, insert, test, verdict, next.

Each loop: ask for a serial; decide under the recipe's retest policy whether the part may be
tested (sequencer.recipe.retest); wait for the part in the socket (sequencer.bench.prompts);
measure it on
its socket's channel; judge, bin and store it (device = the serial, round = the attempt); then
show the verdict big. Between parts the output is off (the runner switches it off after every
device), so quitting at the prompt leaves nothing on and everything stored.

Sockets: a serial keeps the channel it first got; a new serial takes the station's next tray
channel in order, wrapping round. A one-socket station (`tray: {channels: 1}`) tests every part
on channel 1. On the simulator the part "inserted" is the simulated device on that channel, so
serials meet the simulated lot in the order they are first scanned (the 21st new serial on a
20-channel tray meets device 1 again), and a retest meets the same device as before.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

from sequencer.bench.lotrun import RunSummary, aborted, skips
from sequencer.bench.prompts import Lid, Quit, Scanner
from sequencer.judge.engine import Judgement, judge_curve, with_bin
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.recipe.retest import Admission, Attempt, admit, standing_attempt, stands
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder, Smu
from sequencer.safety.rules import Guard
from sequencer.store.runstore import RunStore

PROMPT = "[bold]scan the next part[/] (or type quit)"


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

    def tally(self) -> Tally:
        """The run's parts so far, each counted once with the attempt that stands."""
        results = [standing_attempt(a) for a in self.attempts.values()]
        done = [r for r in results if r is not None and r.completed]
        good = sum(r.good for r in done)
        tests = sum(len(a) for a in self.attempts.values())
        return Tally(len(self.attempts), good, len(done) - good, tests)


@dataclass(frozen=True)
class Tally:
    """Parts seen, parts whose result is in a pass-class bin, parts whose result is not (an
    aborted-only part is neither), and tests (attempts) in all."""

    parts: int
    passed: int
    failed: int
    tests: int


def stored_parts(store: RunStore, channels: tuple[int, ...]) -> Parts:
    """The parts a resumed run holds already, so that retests count across sessions."""
    parts = Parts(channels)
    for serial, number, verdict, klass, standing, channel in store.attempt_rows():
        parts.add(serial, Attempt(int(number), verdict, klass or "", standing != 0))
        parts.sockets.setdefault(serial, int(channel))
    return parts


@dataclass(frozen=True)
class PartResult:
    """One attempt's outcome for the screen: the judgement, its attempt number and, when an
    earlier attempt stays the part's result, a note saying so; whether the part may be tested
    again (`again`, under the retest policy) and the run's count of parts so far."""

    judgement: Judgement
    attempt: int
    note: str = ""
    again: Admission | None = None
    tally: Tally | None = None
    retests_left: int = 0  # further tests the policy allows this part (when `again` allows)


@dataclass(frozen=True)
class Refusal:
    """A scanned part the retest policy does not let be tested; shown instead of a test."""

    serial: str
    why: str

    def __str__(self) -> str:
        return f"[bold red]not tested:[/] {self.serial}: {self.why}; set the part aside"


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
    parts = stored_parts(station.store, station.plan.channels)
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
        again = admit(parts.attempts[serial], station.recipe.part_by_part)
        left = _retests_left(parts.attempts[serial], station.recipe.part_by_part.retests)
        note = _standing_note(parts, serial)
        show(PartResult(judgement, attempt, note, again, parts.tally(), left))
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
        show(Refusal(serial, admission.why))


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
    store.begin_round(attempt)
    try:
        measure_device(station.smu, station.plan, channel, station.guard, recorder, station.clock)
    except BaseException as exc:
        judgement = with_bin(aborted(serial, exc), recipe.judge)
        _store(station, parts, serial, recorder, channel, attempt, judgement, summary)
        if not skips(exc, recipe):
            show(PartResult(judgement, attempt))
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


def _retests_left(attempts: list[Attempt], retests: int) -> int:
    """Tests the policy still allows after these attempts (aborted ones do not count)."""
    return max(retests + 1 - sum(a.completed for a in attempts), 0)


def _standing_note(parts: Parts, serial: str) -> str:
    attempts = parts.attempts[serial]
    if len(attempts) == 1 or attempts[-1].standing:
        return ""
    kept = next(a for a in reversed(attempts) if a.standing)
    return f"the part's result stays attempt {kept.number} ({kept.verdict})"
