"""Measurement uncertainty: the station's accuracy per range, propagated to each figure."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sequencer.judge.engine import judge_curve
from sequencer.model.accuracy import Accuracy, AccuracyTable, RangeAccuracy
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import JudgeSettings
from sequencer.recipe.load import load_recipe
from tests.support.textbook import curve

RECIPES = Path(__file__).resolve().parents[2] / "recipes"

TABLE = AccuracyTable(
    (RangeAccuracy(1e-3, 1e-3, 100e-9), RangeAccuracy(10e-3, 5e-4, 1e-6)),
)


def test_reading_uncertainty_is_rectangular_limit_per_range():
    # A spec limit a read as rectangular gives u = a / sqrt(3) [JCGM 100:2008 4.3.7, from memory]
    got = TABLE.u(np.array([0.5e-3, 1e-3, 2e-3, 50e-3]))
    expected = [
        (1e-3 * 0.5e-3 + 100e-9) / math.sqrt(3),  # 1 mA range holds 0.5 mA ...
        (1e-3 * 1e-3 + 100e-9) / math.sqrt(3),  # ... and exactly 1 mA
        (5e-4 * 2e-3 + 1e-6) / math.sqrt(3),  # 10 mA range
        (5e-4 * 50e-3 + 1e-6) / math.sqrt(3),  # above the top range: the top range
    ]
    assert got == pytest.approx(expected, rel=1e-12)


def test_difference_on_one_range_loses_the_offset():
    # One range: the offset is common to both readings and cancels; two ranges: independent.
    same = TABLE.u_difference(np.array([2e-3]), np.array([3e-3]))
    assert same[0] == pytest.approx(5e-4 * 1e-3 / math.sqrt(3))
    apart = TABLE.u_difference(np.array([0.9e-3]), np.array([1.1e-3]))
    assert apart[0] == pytest.approx(math.hypot(TABLE.u(0.9e-3), TABLE.u(1.1e-3)))


def test_impedance_uncertainty_adds_relative_uncertainties_of_dv_and_di():
    # u_rel(Z)^2 = u_rel(dV)^2 + u_rel(dI)^2 [REFERENCES.md s5]; a noise-free resistor has no
    # Type A part, so only the gains remain (both window ends on one range).
    v = np.linspace(0, 40, 161)
    gain_i, gain_v = 1e-3, 4e-4
    acc = Accuracy(
        AccuracyTable((RangeAccuracy(1.0, gain_i, 1e-6),)),
        AccuracyTable((RangeAccuracy(200.0, gain_v, 5e-3),)),
    )
    j = judge_curve(Curve.from_sweep("r", v, v / 47e3), JudgeSettings(accuracy=acc))
    z = j.figures["dynamic_impedance"]
    expected = 47e3 * math.hypot(gain_v / math.sqrt(3), gain_i / math.sqrt(3))
    assert z.value == pytest.approx(47e3, rel=1e-9)
    assert z.uncertainty == pytest.approx(expected, rel=1e-6)


def test_spot_repeats_add_their_scatter_to_the_instrument_part():
    v = np.arange(0.0, 40.0001, 0.25)
    sweep = curve(v, lam=0.01, rs=1000.0)
    spots = 1.84e-3 + np.array([-2e-6, 0.0, 2e-6, 1e-6, -1e-6])
    c = Curve(
        "s",
        1,
        ("iv", "at-vt"),
        ("sweep", "spot"),
        np.r_[np.zeros(v.size, int), np.ones(5, int)],
        np.r_[v, np.full(5, 25.0)],
        np.r_[v, np.full(5, 25.0)],
        np.r_[sweep, spots],
        np.zeros(v.size + 5),
        np.zeros(v.size + 5, bool),
    )
    s = JudgeSettings()
    ip = judge_curve(c, s).figures["regulated_current"]
    assert ip.value == pytest.approx(spots.mean(), rel=1e-12)
    type_a = spots.std(ddof=1) / math.sqrt(5)
    type_b = s.accuracy.current.u(spots.mean())
    slope = 1 / judge_curve(c, s).figures["dynamic_impedance"].value
    from_v = slope * s.accuracy.voltage.u(25.0)
    assert ip.uncertainty == pytest.approx(math.sqrt(type_a**2 + type_b**2 + from_v**2), rel=1e-6)


def test_station_accuracy_reaches_the_judge():
    recipe = load_recipe(RECIPES / "demo.yaml")
    ten_ma = recipe.judge.accuracy.current.ranges[3]
    assert (ten_ma.range, ten_ma.gain, ten_ma.offset) == pytest.approx((10e-3, 5e-4, 2.5e-6))
    assert recipe.station.accuracy == recipe.judge.accuracy
