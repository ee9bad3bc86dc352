"""Several instruments at once: results come back in the plan's device order and equal a run on
one instrument; each lane has its own guard; what stops one lane stops all, with every output
off and every measured device stored."""

from __future__ import annotations

import dataclasses
import time

import numpy as np
import pytest

from sequencer.bench.lotrun import make_guard, run_lot
from sequencer.bench.parallel import Halted, Lane, lane_guards, run_parallel
from sequencer.plan.make import make_plan
from sequencer.safety.rules import Trip
from tests.support.lots import lot_smu, recipes

DEVICES = 9


@dataclasses.dataclass
class Store:
    """The store's one method a run calls, recording what it is given, in order."""

    added: list = dataclasses.field(default_factory=list)

    def add_device(self, curve, judgement) -> None:
        self.added.append((curve, judgement))


class Slow:
    """A driver whose readings take `delay_s` longer, so that its lane finishes last."""

    def __init__(self, smu, delay_s: float) -> None:
        self.smu, self.delay_s = smu, delay_s

    def __getattr__(self, name):
        return getattr(self.smu, name)

    def measure(self):
        time.sleep(self.delay_s)
        return self.smu.measure()


def lanes_for(recipe, groups, *, wrap=lambda k, smu: smu):
    """One fresh simulated SMU (the same lot) per group of channels."""
    smus = [wrap(k, lot_smu(recipe, DEVICES)[1]) for k in range(len(groups))]
    guards = lane_guards([make_guard(recipe, smu) for smu in smus])
    return [
        Lane(f"smu{k + 1}", smu, guard, tuple(channels))
        for k, (smu, guard, channels) in enumerate(zip(smus, guards, groups, strict=True))
    ], smus


def _plan(recipe):
    return dataclasses.replace(make_plan(recipe), channels=tuple(range(1, DEVICES + 1)))


GROUPS = ([1, 2, 3], [4, 5, 6], [7, 8, 9])


@pytest.mark.parametrize("which", [0, 1])  # the full sweep, the production plan
def test_results_come_back_in_device_order_and_equal_one_instrument(which):
    recipe = dataclasses.replace(recipes()[which], lists=True)
    plan = _plan(recipe)
    # the first lane is slowed down: its devices arrive last but are stored first
    lanes, _ = lanes_for(recipe, GROUPS, wrap=lambda k, smu: Slow(smu, 0.004) if k == 0 else smu)
    parallel, shown = Store(), []
    summary = run_parallel(recipe, plan, lanes, parallel, shown.append)
    serial = Store()
    run_lot(recipe, plan, lot_smu(recipe, DEVICES)[1], serial, lambda done: None)
    assert [c.channel for c, _ in parallel.added] == list(plan.channels)
    assert [d.index for d in shown] == list(range(DEVICES))
    assert summary.status == "completed" and summary.done == DEVICES
    for (a, ja), (b, jb) in zip(parallel.added, serial.added, strict=True):
        # the simulator draws each channel's noise from (seed, channel, times closed)
        np.testing.assert_array_equal(a.level_v, b.level_v)
        np.testing.assert_array_equal(a.current_a, b.current_a)
        assert (ja.verdict, ja.hard_bin, ja.soft_bin) == (jb.verdict, jb.hard_bin, jb.soft_bin)


def test_each_lane_reads_its_own_interlock_and_leaves_its_own_output_off():
    full = recipes()[0]
    step = dataclasses.replace(full.steps[0], stop_v=50.0, points=11)
    recipe = dataclasses.replace(full, steps=(step,), hazardous_voltage_acknowledged=True)
    lanes, smus = lanes_for(recipe, ([1, 2], [3]))
    plan = dataclasses.replace(_plan(recipe), channels=(1, 2, 3))
    run_parallel(recipe, plan, lanes, Store(), lambda done: None)
    # 45 V and 50 V of each device, each read just before it is applied, by its own SMU
    assert [lane.guard.interlock_reads for lane in lanes] == [4, 2]
    assert lanes[0].guard is not lanes[1].guard
    assert not any(smu.output_is_on() for smu in smus)


def test_a_lid_opened_on_one_instrument_stops_every_lane():
    full = recipes()[0]
    step = dataclasses.replace(full.steps[0], stop_v=50.0, points=11)
    recipe = dataclasses.replace(full, steps=(step,), hazardous_voltage_acknowledged=True)
    instruments = []
    groups = ([1, 2, 3, 4], [5, 6, 7, 8])
    smus = []
    # The second lane trips at its 10th level (45 V); the first, three times slower a reading,
    # is then mid-device whatever the simulator's own computing costs.
    for delay_s in (0.006, 0.002):
        inst, smu = lot_smu(recipe, DEVICES)
        instruments.append(inst)
        smus.append(Slow(smu, delay_s))
    instruments[1].set_lid(False)  # the second fixture's lid: open from the start
    guards = lane_guards([make_guard(recipe, smu) for smu in smus])
    parts = zip(smus, guards, groups, strict=True)
    lanes = [Lane(f"smu{k}", smu, guard, tuple(c)) for k, (smu, guard, c) in enumerate(parts)]
    store = Store()
    plan = dataclasses.replace(_plan(recipe), channels=tuple(range(1, 9)))
    with pytest.raises(Trip, match="interlock reads open"):
        run_parallel(recipe, plan, lanes, store, lambda done: None)
    channels = [c.channel for c, _ in store.added]
    assert channels == sorted(channels) and 5 in channels  # stored in order, B's device too
    assert len(channels) < 8  # the first lane stopped early
    reasons = [j.reasons[0] for _, j in store.added if j.verdict == "aborted"]
    assert any("interlock reads open" in r for r in reasons)
    assert any(r.startswith("aborted: stopped with instrument smu1: refused") for r in reasons)
    assert all(j.verdict == "aborted" for c, j in store.added if c.channel >= 5)
    assert not any(s.output_is_on() for s in smus)


def test_a_device_trip_under_skip_ends_only_that_device():
    full = recipes()[0]
    sweep = dataclasses.replace(full.steps[0], on_compliance="trip", compliance_a=1.8e-3)
    recipe = dataclasses.replace(full, steps=(sweep,), on_trip="skip")
    lanes, _ = lanes_for(recipe, GROUPS)
    store = Store()
    summary = run_parallel(recipe, _plan(recipe), lanes, store, lambda done: None)
    verdicts = [j.verdict for _, j in store.added]
    assert len(verdicts) == DEVICES and "aborted" in verdicts  # one lane's trip ...
    assert verdicts.count("aborted") < DEVICES  # ... left the other devices alone
    assert summary.status == "completed"


def test_an_interrupt_stops_every_lane_and_keeps_what_was_measured():
    recipe = recipes()[0]
    # the first lane is quick; the others are still on their first device when it stops
    lanes, smus = lanes_for(recipe, GROUPS, wrap=lambda k, smu: Slow(smu, 0.003) if k else smu)
    store = Store()

    def shown(done) -> None:
        if done.index == 1:
            raise KeyboardInterrupt("stopped by Ctrl-C")

    with pytest.raises(KeyboardInterrupt):
        run_parallel(recipe, _plan(recipe), lanes, store, shown)
    channels = [c.channel for c, _ in store.added]
    assert channels[:2] == [1, 2] and channels == sorted(channels) and len(channels) < DEVICES
    stopped = [j for _, j in store.added if j.verdict == "aborted"]
    assert stopped and all(j.reasons[0] == "aborted: interrupted by the operator" for j in stopped)
    assert not any(smu.output_is_on() for smu in smus)


def test_lanes_need_one_shared_stop_flag():
    recipe = recipes()[1]
    smu = lot_smu(recipe, 3)[1]
    alone = [Lane("a", smu, make_guard(recipe, smu), tuple(range(1, DEVICES + 1)))]
    with pytest.raises(ValueError, match="LaneGuard"):
        run_parallel(recipe, _plan(recipe), alone, Store(), lambda done: None)
    lanes, _ = lanes_for(recipe, ([1, 2],))
    with pytest.raises(ValueError, match=r"channels \[3, 4"):
        run_parallel(recipe, _plan(recipe), lanes, Store(), lambda done: None)


def test_a_halted_lane_guard_refuses_levels():
    recipe = recipes()[1]
    guards = lane_guards([make_guard(recipe, lot_smu(recipe, 1)[1]) for _ in range(2)])
    guards[0].stop.set()
    with pytest.raises(Halted):
        guards[1].check_level(1.0, 1e-3)
