"""Repeated rounds: the schedule's arithmetic on a fake clock, the recipe and command-line
keys, and rounds stored with their number, resumable in the middle of any round."""

from __future__ import annotations

import itertools
import sqlite3
from dataclasses import replace

import pytest

from sequencer.bench.lotrun import RunSummary
from sequencer.bench.schedule import next_due, run_rounds
from sequencer.model.errors import RecipeError
from sequencer.plan.make import make_plan
from sequencer.recipe.load import load_recipe
from sequencer.recipe.repeat import Repeat, repeat_from_options
from sequencer.store.runstore import RunStore
from tests.store.conftest import load, manifest_of, measure_into, write_recipe

MIN, HOUR = 60.0, 3600.0


class FakeClock:
    """Wall-clock seconds that move only when the run sleeps or a round takes time."""

    def __init__(self, start: float = 1_780_000_000.0) -> None:
        self.now = start
        self.sleeps: list[float] = []

    def __call__(self) -> float:
        return self.now

    def sleep(self, seconds: float) -> None:
        self.sleeps.append(seconds)
        self.now += seconds


@pytest.mark.parametrize(
    ("repeat", "rounds"),
    [
        (None, 1),
        (Repeat(10 * MIN, 8 * HOUR), 48),  # a round starts at 0, 10, ... 470 min
        (Repeat(10 * MIN, 8 * HOUR, rounds=5), 5),
        (Repeat(0.0, rounds=3), 3),
        (Repeat(7 * MIN, 1 * HOUR), 9),  # 0, 7, ... 56 min
    ],
)
def test_passes_on_a_schedule(repeat, rounds):
    clock, starts = FakeClock(), []
    t0, n = clock(), 1
    while True:
        starts.append(clock() - t0)
        clock.now += 2 * MIN  # each round takes two minutes
        due = next_due(repeat, n, t0 + starts[-1], t0, clock())
        if due is None:
            break
        clock.now, n = due, n + 1
    assert len(starts) == rounds
    every = repeat.every_s if repeat else 0
    assert all(b - a == max(every, 2 * MIN) for a, b in itertools.pairwise(starts))


def test_a_pass_longer_than_the_interval_is_followed_at_once():
    repeat = Repeat(1 * MIN, 1 * HOUR)
    t0 = 1000.0
    assert next_due(repeat, 1, t0, t0, now=t0 + 5 * MIN) == t0 + 5 * MIN
    assert next_due(repeat, 1, t0, t0, now=t0 + 61 * MIN) is None  # past the end: no new round


def test_recipe_repeat_key_and_command_line_options(tmp_path):
    path = write_recipe(tmp_path, extra="repeat: {every: 10 min, for: 8 h}\n")
    recipe = load_recipe(path)
    assert recipe.repeat == Repeat(600.0, 28800.0)
    assert recipe.repeat.describe() == "a round every 10 min, for 8 h"
    assert repeat_from_options(None, None, None, recipe.repeat) == recipe.repeat
    assert repeat_from_options("90 s", None, 4, recipe.repeat) == Repeat(90.0, None, 4)
    until = repeat_from_options("5 min", None, None, None)
    assert until.until_stopped and "until stopped" in until.describe()


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("extra", "message"),
    [
        ("repeat: {for: 8 h}\n", r"recipe.yaml:15: repeat needs 'every'"),
        ("repeat: {every: 10}\n", r"recipe.yaml:15: repeat.every needs a unit"),
        ("repeat: {every: 1 min, until: 8 h}\n", r"repeat.until is not a known setting"),
        ("repeat: {every: 1 min, rounds: 0}\n", r"repeat rounds must be 1 or more"),
        ("repeat: every hour\n", r"repeat must be a mapping"),
    ],
)
def test_bad_repeat_settings_name_the_line(tmp_path, extra, message):
    with pytest.raises(RecipeError, match=message):
        load_recipe(write_recipe(tmp_path, extra=extra))


@pytest.mark.robustness
def test_bad_command_line_schedules_are_one_clear_error():
    with pytest.raises(RecipeError, match="--for needs --every"):
        repeat_from_options(None, "8 h", None, None)
    with pytest.raises(RecipeError, match="--every needs a unit"):
        repeat_from_options("10", None, None, None)


def _schedule(tmp_path, recipe, repeat, *, stop_after=None):
    """Run rounds into a store with a fake clock; `stop_after` rounds, a Ctrl-C mid-round."""
    clock, seen = FakeClock(), []
    store = RunStore.resume(tmp_path / "run", manifest_of(recipe))

    def measure(part):
        seen.append(part.channels)
        if stop_after is not None and len(seen) > stop_after:
            half = replace(part, channels=part.channels[:2])
            measure_into(store, recipe, half)
            raise KeyboardInterrupt
        clock.now += 30.0
        return measure_into(store, recipe, part)

    try:
        total = run_rounds(
            store, make_plan(recipe), repeat, measure, clock=clock, sleep=clock.sleep
        )
    except KeyboardInterrupt:
        total = RunSummary(total=0, status="interrupted")
    store.finish(total.status, "t")
    return total, seen, clock


def test_passes_are_stored_with_their_number_and_resume_mid_pass(tmp_path, recipe_file):
    recipe = load(recipe_file)
    channels = make_plan(recipe).channels
    repeat = Repeat(10 * MIN, rounds=3)
    total, seen, clock = _schedule(tmp_path, recipe, repeat, stop_after=1)
    assert total.status == "interrupted" and seen == [channels, channels]
    assert clock.sleeps == [10 * MIN - 30.0]

    total, seen, _ = _schedule(tmp_path, recipe, repeat)
    assert seen == [channels[2:], channels, channels][: len(seen)] and len(seen) == 2
    assert total.done == len(channels) - 2 + len(channels) and total.status == "completed"
    db = sqlite3.connect(tmp_path / "run" / "results.sqlite")
    per_pass = db.execute("SELECT round, COUNT(*) FROM device GROUP BY round").fetchall()
    assert per_pass == [(1, len(channels)), (2, len(channels)), (3, len(channels))]
    starts = db.execute("SELECT round, COUNT(DISTINCT round_started) FROM device GROUP BY round")
    assert {n for _, n in starts} == {1}  # one start time per round, kept across the resume
    db.close()
