"""Plans and the pre-flight check: pure functions of the recipe."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from sequencer.model.errors import SafetyError
from sequencer.plan.make import make_plan
from sequencer.recipe.limits import Limits
from sequencer.recipe.load import load_recipe
from sequencer.run.device import ramp_levels
from sequencer.safety.rules import Guard, preflight

RECIPES = Path(__file__).resolve().parents[2] / "recipes"


@pytest.fixture
def recipe():
    return load_recipe(RECIPES / "demo.yaml")


def test_plan_levels_and_peaks(recipe):
    plan = make_plan(recipe)
    sweep, spot = plan.segments
    assert sweep.levels_v[0] == 0.0 and sweep.levels_v[-1] == 40.0 and len(sweep.levels_v) == 81
    assert sweep.levels_v[1] == pytest.approx(0.5)
    assert spot.levels_v == (25.0,) * 5
    assert plan.points_per_device == 86
    assert plan.peak_power_w == pytest.approx(40 * 5e-3)
    # 81 x (1 ms + 2 ms + overhead) + 5 x (5 ms + 2 ms + overhead) + per device, x 20
    assert plan.aperture_s == pytest.approx(0.1 / 50)
    assert 20 * (81 * 0.003 + 5 * 0.007) < plan.estimated_seconds() < 20 * (86 * 0.0045 + 0.02)


def test_preflight_accepts_demo(recipe):
    preflight(make_plan(recipe), recipe.station.limits)


@pytest.mark.parametrize(
    ("limits", "words"),
    [
        (Limits(30.0, 0.02, 1.0), "reaches 40 V, above the station's maximum 30 V"),
        (Limits(60.0, 0.004, 1.0), "compliance 5 mA, above the station's maximum 4 mA"),
        (Limits(60.0, 0.02, 0.1), "40 V x 5 mA = 200 mW, above the station's maximum 100 mW"),
    ],
)
def test_preflight_refuses_and_names_step_and_numbers(recipe, limits, words):
    with pytest.raises(SafetyError, match="step 'iv'") as info:
        preflight(make_plan(recipe), limits)
    assert words in str(info.value)


def test_guard_asks_interlock_before_every_level_above_touch_safe():
    asked = []

    def lid():
        asked.append(1)
        return True

    guard = Guard(Limits(100.0, 0.01, 1.0, touch_safe_v=42.0), lid)
    guard.check_level(40.0, 1e-3)
    assert not asked
    guard.check_level(50.0, 1e-3)
    guard.check_level(60.0, 1e-3)
    guard.check_level(-41.0, 1e-3)
    assert len(asked) == 2  # a lid opened mid-sweep is seen at the next hazardous level


def test_guard_refuses_open_interlock_and_over_limit():
    guard = Guard(Limits(100.0, 0.02, 1.0), lambda: False)
    with pytest.raises(SafetyError, match="interlock reads open"):
        guard.check_level(50.0, 1e-3)
    with pytest.raises(SafetyError, match="above the station's maximum 100 V"):
        guard.check_level(101.0, 1e-3)
    with pytest.raises(SafetyError, match="could exceed"):
        dataclasses.replace(guard, interlock_closed=lambda: True).check_level(99.0, 0.0102)


def test_ramp_down_steps():
    assert ramp_levels(3.0) == [0.0]
    levels = ramp_levels(40.0)
    assert levels[-1] == 0.0
    assert all(a - b <= 5.0 + 1e-9 for a, b in zip([40.0, *levels], levels, strict=False))
