"""Bin gaps: a part that passes every limit must not fall into a fail bin no condition sent it to
(red-team finding 22: with IP-A up to 1.70 mA and IP-B from 1.80 mA, three passing parts were
binned as failures without a word).

Bins take min <= value < max and limits take min <= value <= max (sequencer.judge.decide), so
a top pass bin ending at the limit's max leaves the limit itself out.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from sequencer.judge.bins import assign, pass_gaps
from sequencer.model.errors import RecipeError
from sequencer.model.judgesettings import CLASSIFICATIONS, VERDICTS, BinRule, FigureLimit
from sequencer.model.judgesettings import FigureRange as R
from sequencer.recipe.load import load_recipe

ROOT = Path(__file__).resolve().parents[2]
IP = "regulated_current"
LIMIT = (FigureLimit(IP, 1.62e-3, 1.98e-3),)
CATCH_ALL = BinRule(5, "fail")


def _pass(name: str, low: float | None, high: float | None) -> BinRule:
    return BinRule(1, "pass", name, ("pass",), (), (R(IP, low, high),))


def test_a_gap_between_grades_is_found_from_its_start_to_the_next_bin():
    rules = (_pass("A", 1.62e-3, 1.70e-3), _pass("B", 1.80e-3, None), CATCH_ALL)
    (gap,) = pass_gaps(rules, LIMIT)
    assert gap.low == pytest.approx((1.70e-3,)) and gap.below == pytest.approx(1.80e-3)
    assert rules[gap.bin_index] is CATCH_ALL


def test_the_gap_is_real_a_passing_part_inside_it_lands_in_the_catch_all():
    rules = (_pass("A", 1.62e-3, 1.70e-3), _pass("B", 1.80e-3, None), CATCH_ALL)
    one = np.ones(1, bool)
    chosen = assign(
        rules,
        np.full(1, VERDICTS.index("pass"), np.int8),
        np.full(1, CLASSIFICATIONS.index("ok"), np.int8),
        {IP: np.array([1.75e-3])},
        {IP: ~one},
    )
    assert rules[int(chosen[0])] is CATCH_ALL


def test_a_top_bin_ending_at_the_limit_leaves_the_limit_itself_out():
    rules = (_pass("A", 1.62e-3, 1.80e-3), _pass("B", 1.80e-3, 1.98e-3), CATCH_ALL)
    (gap,) = pass_gaps(rules, LIMIT)
    assert gap.low == pytest.approx((1.98e-3,)) and gap.below is None


def test_grades_that_tile_the_limits_leave_no_gap():
    rules = (_pass("A", 1.62e-3, 1.80e-3), _pass("B", 1.80e-3, None), CATCH_ALL)
    assert pass_gaps(rules, LIMIT) == []


def test_a_fail_bin_with_a_range_means_it():
    reject = BinRule(7, "fail", "customer reject", (), (), (R(IP, 1.70e-3, 1.80e-3),))
    rules = (_pass("A", 1.62e-3, 1.70e-3), reject, _pass("B", 1.80e-3, None), CATCH_ALL)
    assert pass_gaps(rules, LIMIT) == []


def test_bins_on_a_figure_without_limits_are_tried_only_between_their_edges():
    # Grades standing in for limits: below the lowest or above the top edge is a choice.
    rules = (_pass("A", 1e-3, 2e-3), _pass("B", 2.5e-3, 3e-3), CATCH_ALL)
    (gap,) = pass_gaps(rules, ())
    assert gap.low == pytest.approx((2e-3,)) and gap.below == pytest.approx(2.5e-3)


def test_two_figures_are_tried_over_their_product():
    vl = "limiting_voltage"
    rules = (
        BinRule(1, "pass", "low", ("pass",), (), (R(IP, None, 1.8e-3), R(vl, None, 3.0))),
        BinRule(1, "pass", "high", ("pass",), (), (R(IP, 1.8e-3, None),)),
        CATCH_ALL,
    )
    limits = (*LIMIT, FigureLimit(vl, None, 3.5))
    gaps = pass_gaps(rules, limits)
    at = [dict(zip(g.figures, g.low, strict=True)) for g in gaps]
    assert at and all(p[IP] < 1.8e-3 and p[vl] >= 3.0 for p in at)


def test_the_recipe_loader_refuses_a_gap_at_the_bins_line(tmp_path):
    text = (ROOT / "recipes" / "demo.yaml").read_text()
    text = text.replace("{min: 1.62 mA, max: 1.74 mA}", "{min: 1.62 mA, max: 1.70 mA}")
    text = text.replace("{min: 1.74 mA, max: 1.86 mA}", "{min: 1.80 mA, max: 1.86 mA}")
    path = tmp_path / "gap.yaml"
    station = f"station: {ROOT}/recipes/demo-station.yaml"
    path.write_text(text.replace("station: demo-station.yaml", station))
    with pytest.raises(RecipeError) as caught:
        load_recipe(path)
    message = str(caught.value)
    line = 1 + text.splitlines().index("  bins:")
    assert re.match(rf"{re.escape(str(path))}:{line}: judge\.bins ", message), message
    assert "regulated current from 1.7 mA up to 1.8 mA" in message and "bin 5" in message


def test_the_shipped_recipes_have_no_gap():
    for name in ("demo.yaml", "demo-production.yaml"):
        s = load_recipe(ROOT / "recipes" / name).judge
        assert pass_gaps(s.bins, s.limits) == [], name
