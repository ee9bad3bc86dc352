"""Bins: first match wins, hard bin with its class, soft bin as grade or reason."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sequencer.judge.engine import MISSING, Judgement, judge_curve, with_bin
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import FIGURES, BinRule, FigureLimit, FigureRange, JudgeSettings
from sequencer.recipe.load import load_recipe
from tests.support.textbook import curve

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
GRID = np.arange(0.0, 40.0001, 0.5)


def _part(rs: float) -> Curve:
    return Curve.from_sweep(f"rs{rs:g}", GRID, curve(GRID, lam=0.01, rs=rs))


@pytest.mark.parametrize(
    ("rs", "grade"),
    # IP of the textbook part with IDSS 10 mA, VP -3 V, lambda 0.01 at 25 V [REFERENCES.md s2
    # model]: about 1.72, 1.84 and 1.94 mA -> the demo's current classes A, B, C.
    [(1090.0, "IP-A"), (1000.0, "IP-B"), (930.0, "IP-C")],
)
def test_demo_current_classes_for_matched_strings(rs, grade):
    s = load_recipe(RECIPES / "demo.yaml").judge
    j = judge_curve(_part(rs), s)
    assert (j.verdict, j.hard_bin, j.bin_class, j.soft_bin) == ("pass", 1, "pass", grade)


def test_failing_device_gets_the_reason_as_soft_bin():
    s = load_recipe(RECIPES / "demo.yaml").judge
    j = judge_curve(_part(1500.0), s)  # about 1.3 mA: below the 1.62 mA minimum
    assert j.verdict == "fail"
    assert (j.hard_bin, j.bin_class, j.soft_bin) == (5, "fail", "regulated current below min")


def test_default_bins_cover_every_outcome():
    s = JudgeSettings(limits=(FigureLimit("regulated_current", 1.62e-3, 1.98e-3),))
    assert judge_curve(_part(1000.0), s).hard_bin == 1
    assert judge_curve(_part(1500.0), s).hard_bin == 5
    open_part = Curve.from_sweep("o", GRID, np.zeros(GRID.size))
    assert judge_curve(open_part, s).hard_bin == 3
    dip = curve(GRID, lam=0.01) * (1 - 0.1 * np.exp(-(((GRID - 15.0) / 1.0) ** 2)))
    assert judge_curve(Curve.from_sweep("d", GRID, dip), s).hard_bin == 4
    stopped = Judgement("x", dict.fromkeys(FIGURES, MISSING), "aborted", ("aborted: lost",))
    binned = with_bin(stopped, s)
    assert (binned.hard_bin, binned.soft_bin, binned.verdict) == (9, "aborted", "aborted")


def test_first_match_wins_and_pass_bins_take_only_passing_devices():
    wide = FigureRange("regulated_current", 1e-3, 3e-3)
    bins = (
        BinRule(7, "pass", "wide", ("pass",), (), (wide,)),
        BinRule(8, "pass", "also wide", ("pass",), (), (wide,)),
        BinRule(6, "fail", "any"),
    )
    limits = (FigureLimit("dynamic_impedance", 1e9, None),)  # every part fails this
    s = JudgeSettings(bins=bins)
    assert judge_curve(_part(1000.0), s).hard_bin == 7
    failing = judge_curve(_part(1000.0), JudgeSettings(bins=bins, limits=limits))
    assert (failing.verdict, failing.hard_bin) == ("fail", 6)
    assert failing.soft_bin == "any"


def test_a_lower_bound_never_satisfies_a_maximum():
    bound = FigureRange("dynamic_impedance", None, 1e12)
    bins = (BinRule(1, "fail", "below 1 Tohm", (), (), (bound,)), BinRule(2, "fail", "other"))
    flat = Curve.from_sweep("f", GRID, np.full(GRID.size, 1.8e-3) * np.minimum(GRID, 1))
    rng = np.random.default_rng(5)
    noisy = Curve.from_sweep("f", GRID, flat.current_a + rng.normal(0, 30e-9, GRID.size))
    j = judge_curve(noisy, JudgeSettings(bins=bins))
    assert j.figures["dynamic_impedance"].at_least
    assert j.hard_bin == 2
