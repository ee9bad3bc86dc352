"""Rounds over the tray on a schedule: the round in flight finished, then the next when it is due.

Each round is one `run_lot` over the channels that still lack a result in it, with the store
told which round the devices belong to; nothing of a round is kept here but its counts, so an
overnight run's memory does not grow with its length. Time is wall-clock (UTC seconds) because
a resumed run continues a schedule another process began; clock and sleep are injected.
"""

from __future__ import annotations

import datetime as dt
import time
from collections.abc import Callable
from dataclasses import dataclass, fields, replace

from sequencer.bench.lotrun import RunSummary
from sequencer.plan.segments import Plan
from sequencer.recipe.repeat import Repeat
from sequencer.store.resume import Progress
from sequencer.store.runstore import RunStore


@dataclass(frozen=True)
class Wait:
    """The run is waiting for round `round_no`, due at `due` (UTC seconds)."""

    round_no: int
    due: float
    seconds: float


def epoch(stamp: str | None) -> float | None:
    return None if not stamp else dt.datetime.fromisoformat(stamp).timestamp()


def stamp(seconds: float) -> str:
    return dt.datetime.fromtimestamp(seconds, dt.UTC).isoformat(timespec="milliseconds")


def next_due(
    repeat: Repeat | None, round_no: int, round_started: float, run_started: float, now: float
) -> float | None:
    """When the round after `round_no` (begun at `round_started`) may start; None: it is over."""
    if repeat is None or (repeat.rounds is not None and round_no >= repeat.rounds):
        return None
    due = max(round_started + repeat.every_s, now)
    if repeat.for_s is not None and due >= run_started + repeat.for_s:
        return None
    return due


def work_left(progress: Progress, plan: Plan, repeat: Repeat | None, now: float) -> bool:
    """Whether a (resumed) run has anything left to measure."""
    if any(c not in progress.done for c in plan.channels):
        return True
    started = epoch(progress.round_started) or now
    run_started = epoch(progress.run_started) or now
    return next_due(repeat, progress.round_no, started, run_started, now) is not None


def add_up(total: RunSummary, part: RunSummary) -> None:
    """Add the counts of one round to the run's (every numeric field, and the reasons)."""
    for f in fields(RunSummary):
        mine, theirs = getattr(total, f.name), getattr(part, f.name)
        if isinstance(mine, int | float) and not isinstance(mine, bool):
            setattr(total, f.name, mine + theirs)
        elif isinstance(mine, dict):
            for key, count in theirs.items():
                mine[key] = mine.get(key, 0) + count


def run_rounds(
    store: RunStore,
    plan: Plan,
    repeat: Repeat | None,
    measure: Callable[[Plan], RunSummary],
    *,
    on_round: Callable[[int, RunSummary], None] = lambda n, s: None,
    on_wait: Callable[[Wait], None] = lambda w: None,
    clock: Callable[[], float] = time.time,
    sleep: Callable[[float], None] = time.sleep,
) -> RunSummary:
    """Finish the round in flight (store.progress), then run rounds until the schedule ends.
    Exceptions (a stop, a safety trip, a lost instrument) propagate from `measure`."""
    progress = store.progress
    round_no, done = progress.round_no, progress.done
    started = epoch(progress.round_started)
    run_started = epoch(progress.run_started) or clock()
    total = RunSummary(total=0)
    while True:
        remaining = tuple(c for c in plan.channels if c not in done)
        if remaining:
            started = started or clock()
            store.begin_round(round_no, stamp(started))
            part = measure(replace(plan, channels=remaining))
            add_up(total, part)
            on_round(round_no, part)
        due = next_due(repeat, round_no, started or clock(), run_started, clock())
        if due is None:
            break
        round_no, done, started = round_no + 1, frozenset(), None
        wait = due - clock()
        if wait > 0:
            on_wait(Wait(round_no, due, wait))
            sleep(wait)
    total.status = "completed"
    return total
