"""The production plan as a pure function: the levels a `figures:` step becomes, the recipe
checks around it, and the limiting-voltage search on curves whose crossing is known."""

from __future__ import annotations

import dataclasses
import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sequencer.model.errors import RecipeError
from sequencer.model.judgesettings import JudgeSettings
from sequencer.plan.kneesearch import KneeSearch, next_level
from sequencer.plan.make import make_plan
from sequencer.plan.production import fixed_levels, knee_search, window_levels
from sequencer.recipe.figuresstep import FiguresStep
from sequencer.recipe.load import load_recipe
from sequencer.safety.rules import preflight
from tests.support.lots import PRODUCTION, regulator_current


@pytest.mark.parametrize(
    ("readings", "expected"),
    [(3, [23, 25, 27]), (4, [23, 23, 27, 27]), (5, [23, 23, 25, 27, 27])],
)
def test_a_window_is_read_at_its_edges_and_an_odd_reading_at_its_centre(readings, expected):
    assert window_levels(25.0, 4.0, readings) == expected


def test_the_demo_production_plan_follows_the_judge_section():
    recipe = load_recipe(PRODUCTION)
    plan = make_plan(recipe)
    fixed, search = plan.segments
    # knee window 6 V +- 1 V (3 readings), slope window 25 V +- 2 V (4), peak 40 V: the judge
    # section of recipes/demo-production.yaml
    assert (fixed.step, fixed.kind) == ("production", "sweep")
    assert fixed.levels_v == (5.0, 6.0, 7.0, 23.0, 23.0, 27.0, 27.0, 40.0)
    assert search.kind == "sweep" and search.search is not None
    assert search.levels_v == (0.0, 5.0)  # the range pre-flight checks
    assert search.search.start_v == 2.0 and search.search.resolution_v == 0.5
    assert plan.lists
    preflight(plan, recipe.effective_limits)  # the whole range at the step's compliance


def test_reverse_level_and_spot_repeats_join_the_plan():
    judge = JudgeSettings(reverse_voltage_v=-5.0, peak_voltage_v=None, slope_window_v=2.0)
    step = FiguresStep("p", 5e-3, 0.0, repeats=3)
    assert fixed_levels(step, judge) == (-5.0, 5.0, 6.0, 7.0, 24.0, 25.0, 26.0)
    from sequencer.plan.production import production_segments

    segments = production_segments(step, judge)
    assert [(s.step, s.kind, s.levels_v) for s in segments[1:2]] == [
        ("p-at-vt", "spot", (25.0, 25.0, 25.0))
    ]


def _write(tmp_path, figures: str) -> object:
    text = PRODUCTION.read_text()
    start = text.index("steps:")
    end = text.index("judge:")
    body = f"steps:\n  - figures: {{{figures}}}\n\n"
    path = tmp_path / "recipe.yaml"
    path.write_text(text[:start] + body + text[end:])
    (tmp_path / "demo-station.yaml").write_text(
        (PRODUCTION.parent / "demo-station.yaml").read_text()
    )
    return path


@pytest.mark.parametrize(
    ("figures", "message"),
    [
        ("compliance: 5 mA, search_from: 5 V", "search_from must lie below the knee window's"),
        ("compliance: 5 mA, typical_limiting_voltage: 6 V", "typical_limiting_voltage must lie"),
        ("compliance: 5 mA, test_window_readings: 2", "test_window_readings must be 3 to 50"),
        ("compliance: 5 mA, knee_resolution: 0 V", "knee_resolution must be positive"),
        ("compliance: 5 mA, window: 3", "window is not a known setting"),
        ("settle: 1 ms", "needs 'compliance'"),
    ],
)  # fmt: skip
def test_a_bad_figures_step_is_refused_with_its_line(tmp_path, figures, message):
    path = _write(tmp_path, figures)
    with pytest.raises(RecipeError, match=re.escape(message)) as caught:
        load_recipe(path)
    assert f"{path}:" in str(caught.value)


# --- the search ------------------------------------------------------------------------------

FIXED = (5.0, 6.0, 7.0, 23.0, 23.0, 27.0, 27.0, 40.0)


def crossing(ref: float, ip: float, knee_v: float) -> float:
    """Where regulator_current reaches ref, by bisection [computed, bisection on the curve]."""
    lo, hi = 0.0, 40.0
    for _ in range(200):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if regulator_current(mid, ip, knee_v) < ref else (lo, mid)
    return (lo + hi) / 2


def run_search(s: KneeSearch, ip: float, knee_v: float) -> tuple[list[float], float, float]:
    """(levels the search read, ref, true crossing); readings are the curve without noise."""
    ref = 0.8 * float(regulator_current(25.0, ip, knee_v))
    levels = list(FIXED)
    read: list[float] = []
    while (level := next_level(s, ref, np.array(levels), regulator_current(levels, ip, knee_v),
                               np.ones(len(levels), bool), len(read))) is not None:  # fmt: skip
        read.append(level)
        levels.append(level)
    return read, ref, crossing(ref, ip, knee_v)


def search(**changes) -> KneeSearch:
    base = KneeSearch(0.0, 5.0, 2.0, 0.5, 8, 25.0, 4.0, 0.8)
    return dataclasses.replace(base, **changes)


@settings(max_examples=200, deadline=None)
@given(
    ip=st.floats(0.2e-3, 5e-3),
    knee_v=st.floats(0.4, 2.6),
    start=st.floats(0.1, 4.9),
    resolution=st.floats(0.05, 1.0),
)
def test_the_search_brackets_the_crossing_within_its_resolution(ip, knee_v, start, resolution):
    s = search(start_v=start, resolution_v=resolution, max_points=30)
    read, ref, true_v = run_search(s, ip, knee_v)
    assert len(read) == len(set(read)), "no level is read twice"
    assert all(s.low_v <= v <= s.high_v for v in read)
    levels = np.array(sorted([*FIXED, *read]))
    above = levels[regulator_current(levels, ip, knee_v) >= ref]
    below = levels[levels < above[0]]
    assert below.size, "a reading below the crossing exists (the judge needs one)"
    assert below[-1] < true_v <= above[0]
    if above[0] <= s.high_v:  # bracketed inside the search's range: as narrow as asked
        assert above[0] - below[-1] <= resolution * (1 + 1e-9)


def test_a_device_near_its_typical_voltage_takes_two_readings():
    s = search()
    read, _, true_v = run_search(s, 1.8e-3, 1.25)
    assert abs(true_v - s.start_v) < s.resolution_v / 2  # the case this test is about
    assert len(read) == 2


@pytest.mark.parametrize("ref", [float("nan"), 0.0, -1e-3])
def test_no_reference_no_search(ref):
    levels = np.array(FIXED)
    assert next_level(search(), ref, levels, regulator_current(levels), np.ones(8, bool), 0) is None


def test_no_search_for_a_curve_that_never_reaches_the_reference():
    levels = np.array(FIXED)
    current = regulator_current(levels)
    assert next_level(search(), 1.0, levels, current, np.ones(8, bool), 0) is None


def test_a_clamped_reading_below_the_crossing_ends_the_search():
    levels = np.array([*FIXED, 2.25])
    current = regulator_current(levels)
    good = np.ones(levels.size, bool)
    ref = 0.8 * float(regulator_current(25.0))
    assert next_level(search(), ref, levels, current, good, 1) is not None
    good[-1] = False  # 2.25 V is not a usable reading: the judge reports VL missing
    assert next_level(search(), ref, np.array([*FIXED, 1.0, 2.25]), np.r_[current[:-1], 1e-4,
                      current[-1]], np.r_[good[:-1], True, False], 2) is None  # fmt: skip


def test_the_search_stops_at_its_point_budget():
    s = search(resolution_v=1e-4, max_points=3)
    read, _, _ = run_search(s, 1.8e-3, 0.5)
    assert len(read) == 3


def test_a_search_range_above_the_knee_window_is_refused():
    step = FiguresStep("p", 5e-3, 0.0, search_from_v=5.5)
    with pytest.raises(ValueError, match="below the knee window"):
        knee_search(step, JudgeSettings())
