"""Coverage factors by the GUM: Student's t at Welch-Satterthwaite degrees of freedom, and the
gain error shared by IP and the knee current cancelling in VL."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import t as student

from sequencer.judge.coverage import coverage_factor, effective_dof
from sequencer.judge.engine import judge_curve
from sequencer.model.accuracy import Accuracy, AccuracyTable, RangeAccuracy
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import JudgeSettings
from tests.support.textbook import curve


@pytest.mark.parametrize("p", [0.6827, 0.95, 0.99])
def test_k_is_students_t_for_truncated_dof(p):
    # Two-sided t quantile [src: scipy.stats.t.ppf]; nu_eff truncated to the next lower
    # integer [JCGM 100:2008 G.4.1 note].
    nu = np.array([1, 2, 3, 4.9, 7, 12, 30, 299, 301, 1000, 1e5])
    expected = student.ppf((1 + p) / 2, np.floor(nu))
    assert coverage_factor(p, nu) == pytest.approx(expected, rel=1e-7)


def test_infinite_dof_is_the_normal_quantile_and_no_dof_gives_no_k():
    # 1.95996 for 95 % [src: scipy.stats.norm.ppf(0.975)]
    k = coverage_factor(0.95, np.array([np.inf, np.nan, 0.0]))
    assert k[0] == pytest.approx(1.959963985, rel=1e-8)
    assert np.isnan(k[1]) and np.isnan(k[2])


def test_welch_satterthwaite_by_hand():
    # nu_eff = u^4 / sum(u_i^4 / nu_i) [JCGM 100:2008 G.2b]: u_i = 3 (nu 4), 4 (nu inf):
    # u^2 = 25, nu_eff = 625 / (81 / 4) = 30.86 [computed by hand]
    nu = effective_dof([(np.array([3.0]), 4.0), (np.array([4.0]), np.inf)])
    assert nu[0] == pytest.approx(625 / (81 / 4))
    assert np.isinf(effective_dof([(np.array([1.0]), np.inf)])[0])


def test_few_points_in_the_slope_window_widen_u_by_t():
    # A 2 V window on a 0.5 V grid holds 5 points: the fit has 3 degrees of freedom, and with
    # noise far above the instrument's slope error k is nearly t(0.975, 3) = 3.18.
    v = np.arange(0, 30.01, 0.5)
    i = curve(v, lam=0.01) + np.random.default_rng(5).normal(0, 300e-9, v.size)
    fig = judge_curve(Curve.from_sweep("d", v, i), JudgeSettings()).figures["dynamic_impedance"]
    assert 3 <= fig.dof < 4
    assert fig.coverage_factor == pytest.approx(student.ppf(0.975, 3), rel=1e-6)
    assert fig.expanded == pytest.approx(fig.coverage_factor * fig.uncertainty)


def test_a_fixed_k_from_the_recipe_is_kept():
    v = np.arange(0, 30.01, 0.5)
    s = JudgeSettings(coverage_factor=2.0)
    fig = judge_curve(Curve.from_sweep("d", v, curve(v, lam=0.01)), s).figures["regulated_current"]
    assert fig.coverage_factor == 2.0


def test_the_gain_error_shared_by_ip_and_the_knee_current_cancels_in_vl():
    # VL is where I = 0.8 IP. A gain error g multiplies both sides: I(1 + g) = 0.8 IP (1 + g)
    # has the same root, so a 1 % gain (no offset) must not enter u(VL) [JCGM 100:2008 5.2,
    # correlated input quantities]. One current range, so the same gain applies throughout.
    table = AccuracyTable((RangeAccuracy(0.1, 0.01, 0.0),))
    s = JudgeSettings(accuracy=Accuracy(current=table))
    v = np.arange(0, 30.01, 0.05)
    exact = curve(v)
    plain = judge_curve(Curve.from_sweep("d", v, exact), s).figures["limiting_voltage"]
    gained = judge_curve(Curve.from_sweep("d", v, exact * 1.01), s).figures["limiting_voltage"]
    assert gained.value == pytest.approx(plain.value, rel=1e-9)
    # The gain alone would give u(VL) ~ 0.8 IP x 1 % / sqrt 3 / (dI/dV) ~ 5 mV at the knee.
    slope = np.interp(plain.value, v[1:], np.diff(exact) / np.diff(v))
    gain_part = 0.8 * 1.746e-3 * 0.01 / math.sqrt(3) / slope
    assert plain.uncertainty < gain_part / 5


def test_equal_readings_in_the_slope_window_give_an_at_least_bound_not_a_failure():
    # A 5.5 MOhm part read with about 1 uA resolution (2^-20 A: the rounded readings are exact
    # binary numbers, so the fit's residuals are exactly 0): every reading around 25 V is the
    # same number. The slope is hidden below the resolution: ZT is "at least" a bound set by
    # the resolution (u = q / sqrt 12 per reading [JCGM 100:2008 F.2.2.1]), never a failure.
    q = 2.0**-20
    v = np.arange(0, 30.01, 0.5)
    read = np.round((curve(v) + v / 5.5e6) / q) * q
    window = np.abs(v - 25) <= 1
    assert np.ptp(read[window]) == 0  # (the case in point)
    j = judge_curve(Curve.from_sweep("d", v, read), JudgeSettings())
    zt = j.figures["dynamic_impedance"]
    # The bound 1 / (t(3) q / sqrt(12 Sxx)), Sxx = 2.5 V^2 [computed by hand]: about 1.8 MOhm.
    bound = 1 / (student.ppf(0.975, 3) * q / math.sqrt(12 * 2.5))
    assert zt.at_least and zt.value == pytest.approx(bound, rel=1e-6)
    assert j.verdict == "pass", j.reasons
