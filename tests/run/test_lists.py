"""Instrument-side lists in the runner: the same readings as point by point, every level past
the guard before the list is sent, and point by point wherever the guard must act per point."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from sequencer.bench.lotrun import make_guard
from sequencer.plan.make import make_plan
from sequencer.plan.segments import Segment
from sequencer.recipe.limits import Limits, Ratings, effective_limits
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder
from sequencer.run.segment import list_is_safe
from sequencer.safety.rules import Guard
from simulator.smu_model import CURRENT_RESOLUTION_OF_RANGE, VOLTAGE_RESOLUTION_V
from tests.support.lots import lot_smu, recipes


class RecordingGuard(Guard):
    """A guard that notes each level it passed, in the order of the SCPI messages sent."""

    def __init__(self, *args, sent: list[str], **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.sent = sent
        self.checked: list[tuple[int, float]] = []

    def check_level(self, volts: float, compliance_a: float) -> None:
        super().check_level(volts, compliance_a)
        self.checked.append((len(self.sent), volts))


def run_device(recipe, channel: int, lists: bool):
    recipe = dataclasses.replace(recipe, lists=lists)
    sent: list[str] = []
    _, smu = lot_smu(recipe, 4, sent=sent)
    plan = make_plan(recipe)
    base = make_guard(recipe, smu)
    guard = RecordingGuard(base.limits, base.interlock_closed, base.no_clamp_steps, sent=sent)
    recorder = Recorder()
    measure_device(smu, plan, channel, guard, recorder)
    return recorder.curve("d", channel, plan), sent, guard


@pytest.mark.parametrize("which", [0, 1])  # the full sweep, the production plan
@pytest.mark.parametrize("channel", [1, 2, 3])
def test_a_list_reads_what_point_by_point_reads(which, channel):
    recipe = recipes()[which]
    listed, sent_list, _ = run_device(recipe, channel, lists=True)
    plain, sent_plain, _ = run_device(recipe, channel, lists=False)
    assert any(m.startswith("SOUR:VOLT:MODE LIST") for m in sent_list)
    assert not any(m.startswith("SOUR:VOLT:MODE LIST") for m in sent_plain)
    np.testing.assert_array_equal(listed.level_v, plain.level_v)
    np.testing.assert_array_equal(listed.segment, plain.segment)
    np.testing.assert_array_equal(listed.in_compliance, plain.in_compliance)
    # The simulator draws the same noise in the same order either way; the solve of a whole
    # list at once may differ from one level at a time in the last bits, which a reading
    # rounded to the instrument's resolution can move by one step at most.
    step_i = CURRENT_RESOLUTION_OF_RANGE * 1e-2  # the 10 mA range
    np.testing.assert_allclose(listed.current_a, plain.current_a, rtol=0, atol=step_i * 1.01)
    np.testing.assert_allclose(listed.voltage_v, plain.voltage_v, rtol=0,
                               atol=VOLTAGE_RESOLUTION_V * 1.01)  # fmt: skip
    assert len(sent_list) < len(sent_plain)


def test_every_level_of_a_list_is_checked_before_the_list_is_sent():
    curve, sent, guard = run_device(recipes()[0], 1, lists=True)
    lists = [k for k, m in enumerate(sent) if m.startswith("SOUR:VOLT:MODE LIST")]
    assert len(lists) == 2  # the sweep and the spot repeats
    for where, step_levels in zip(lists, (curve.level_v[:81], curve.level_v[81:]), strict=True):
        before = [v for k, v in guard.checked if k <= where]
        assert list(step_levels) == before[-len(step_levels) :]
    fetches = [m for m in sent if m == "FETC?"]
    assert len(fetches) == 2 and "READ?;:STAT:QUES:COND?;:SYST:ERR:COUN?" not in sent


def _segment(peak_v: float = 40.0, step: str = "iv") -> Segment:
    return Segment(step, "sweep", (0.0, peak_v / 2, peak_v), 5e-3, 0.0)


def _guard(*, ratings: Ratings | None = None, no_clamp: frozenset[str] = frozenset()) -> Guard:
    station = Limits(60.0, 20e-3, 0.25)
    return Guard(effective_limits(station, None, ratings), lambda: True, no_clamp)


def test_lists_only_where_the_guard_could_not_act_part_way():
    assert list_is_safe(_segment(), _guard())
    assert not list_is_safe(_segment(50.0), _guard())  # hazardous: interlock before each level
    assert not list_is_safe(_segment(), _guard(no_clamp=frozenset({"iv"})))  # must not clamp
    # a dissipation rating that only the worst-case current keeps (40 V x 5 mA = 200 mW)
    relying = Ratings(max_dissipation_w=0.1, worst_case_current_a=2.2e-3)
    assert not list_is_safe(_segment(), _guard(ratings=relying))
    assert list_is_safe(_segment(), _guard(ratings=Ratings(max_dissipation_w=0.25)))


def test_a_hazardous_step_goes_point_by_point_even_with_lists_on():
    full = recipes()[0]
    step = dataclasses.replace(full.steps[0], stop_v=50.0, points=11)
    recipe = dataclasses.replace(
        full, steps=(step,), lists=True, hazardous_voltage_acknowledged=True
    )
    _, sent, guard = run_device(recipe, 1, lists=True)
    assert not any(m.startswith("SOUR:VOLT:MODE LIST") for m in sent)
    assert guard.interlock_reads == 2  # 45 V and 50 V, each just before it was applied


class Interrupting:
    """Wraps a driver; the list's error check (sent after INIT) raises KeyboardInterrupt."""

    def __init__(self, smu) -> None:
        self.smu = smu
        self.levels: list[float] = []

    def __getattr__(self, name):
        return getattr(self.smu, name)

    def list_sweep(self, levels_v, **kwargs):
        raise KeyboardInterrupt("stopped mid-list")

    def set_voltage(self, volts: float) -> None:
        self.levels.append(volts)
        self.smu.set_voltage(volts)


def test_an_interrupted_list_ramps_down_from_its_last_level():
    recipe = dataclasses.replace(recipes()[0], lists=True)
    _, smu = lot_smu(recipe, 2)
    wrapped = Interrupting(smu)
    guard = make_guard(recipe, smu)
    with pytest.raises(KeyboardInterrupt):
        measure_device(wrapped, make_plan(recipe), 1, guard, Recorder())
    # the sweep's list ends at 40 V, where the instrument stays once it has the list: the
    # ramp starts 5 V below it (sequencer.run.device.ramp_levels), then the output goes off
    assert wrapped.levels == [0.0, 35.0, 30.0, 25.0, 20.0, 15.0, 10.0, 5.0, 0.0]
    assert not smu.output_is_on()
