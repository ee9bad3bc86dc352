"""The judge against textbook formulas and worked values from outside the project."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from sequencer.judge.engine import fit_slope, impedance_from_slope, judge_curve
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import FigureLimit, JudgeSettings
from tests.support.textbook import closed_form_current, closed_form_vl, curve

GRID = np.arange(0.0, 40.0001, 0.05)


@pytest.mark.reference
@pytest.mark.parametrize(
    ("rs", "ip_ref", "vl_ref"),
    [
        # REFERENCES.md s2 worked values, IDSS 10 mA, VP -3 V [computed, closed form]
        (470.0, 2.9287e-3, 1.77654),
        (1000.0, 1.7463e-3, 1.85455),
    ],
)
def test_ip_and_vl_match_closed_form_self_bias(rs, ip_ref, vl_ref):
    c = Curve.from_sweep("t", GRID, curve(GRID, lam=0.0, rs=rs))
    j = judge_curve(c, JudgeSettings(knee_fraction=0.8))
    ip = j.figures["regulated_current"].value
    assert ip == pytest.approx(closed_form_current(10e-3, -3.0, rs), rel=1e-6)
    assert ip == pytest.approx(ip_ref, rel=1e-4)
    vl = j.figures["limiting_voltage"].value
    assert vl == pytest.approx(closed_form_vl(0.8 * ip, 10e-3, -3.0, rs), rel=2e-3)
    assert vl == pytest.approx(vl_ref, rel=2e-3)


@pytest.mark.reference
def test_vl_of_bare_jfet_is_fixed_fraction_of_pinch_off():
    # RS = 0, IL = 0.8 IDSS: VL = (1 - sqrt 0.2)|VP| = 1.65836 V [REFERENCES.md s2, computed]
    ids = np.array(
        [10e-3 * min(1.0, (2 * (v / 3) - (v / 3) ** 2)) if v < 3 else 10e-3 for v in GRID]
    )
    c = Curve.from_sweep("t", GRID, ids)
    j = judge_curve(c, JudgeSettings(knee_fraction=0.8))
    assert j.figures["limiting_voltage"].value == pytest.approx(1.65836, rel=1e-3)


@pytest.mark.reference
def test_dynamic_impedance_with_channel_length_modulation():
    # lambda 0.01, RS 1 k: I(25 V) = 1.84033 mA, ZT(25 V) = 280.3 kOhm [REFERENCES.md s2, ngspice]
    c = Curve.from_sweep("t", GRID, curve(GRID, lam=0.01, rs=1000.0))
    j = judge_curve(c, JudgeSettings(slope_window_v=2.0))
    assert j.figures["regulated_current"].value == pytest.approx(1.84033e-3, rel=1e-5)
    assert j.figures["dynamic_impedance"].value == pytest.approx(280.3e3, rel=2e-3)
    assert not j.figures["dynamic_impedance"].at_least


def test_resistor_impedance_is_its_resistance():
    # Ohm's law: a resistor's dV/dI is its resistance everywhere.
    v = np.linspace(0, 40, 81)
    j = judge_curve(Curve.from_sweep("r", v, v / 47e3), JudgeSettings())
    assert j.figures["dynamic_impedance"].value == pytest.approx(47e3, rel=1e-9)
    assert j.figures["knee_impedance"].value == pytest.approx(47e3, rel=1e-9)


def test_slope_and_stderr_match_scipy_linregress():
    rng = np.random.default_rng(7)
    v = np.linspace(23, 27, 17)
    i = 1.8e-3 + v / 3e5 + rng.normal(0, 30e-9, v.size)
    ref = stats.linregress(v, i)  # scipy.stats.linregress as the outside reference
    fit = fit_slope(v, i)
    assert fit.slope == pytest.approx(ref.slope, rel=1e-9)
    assert fit.stderr == pytest.approx(ref.stderr, rel=1e-9)


def test_masked_rows_match_scipy_linregress_row_by_row():
    # Each row fitted over its own points only (the others masked out), as the lot judge does.
    from sequencer.judge.slopes import window_fit

    rng = np.random.default_rng(8)
    v = np.tile(np.linspace(23, 27, 17), (5, 1)) + rng.normal(0, 1e-4, (5, 17))
    i = 1.8e-3 + v / rng.uniform(1e5, 1e7, (5, 1)) + rng.normal(0, 30e-9, v.shape)
    mask = rng.random(v.shape) > 0.3
    fit = window_fit(v, i, mask)
    for row in range(5):
        ref = stats.linregress(v[row][mask[row]], i[row][mask[row]])  # outside reference
        assert fit.slope[row] == pytest.approx(ref.slope, rel=1e-9)
        assert fit.stderr[row] == pytest.approx(ref.stderr, rel=1e-9)
        assert fit.at(25.0)[row] == pytest.approx(ref.intercept + 25.0 * ref.slope, rel=1e-12)


def test_flat_slope_gives_a_lower_bound_not_a_number():
    rng = np.random.default_rng(3)
    v = np.linspace(23, 27, 9)
    i = 1.8e-3 + rng.normal(0, 30e-9, v.size)
    fit = fit_slope(v, i)
    assert abs(fit.slope) < 2 * fit.stderr  # within noise: no impedance can be claimed
    z = impedance_from_slope(fit)
    assert z.at_least and np.isnan(z.uncertainty)
    assert z.value == pytest.approx(1 / (fit.slope + 2 * fit.stderr))


def test_limits_name_every_failing_figure():
    v = np.linspace(0, 40, 161)
    c = Curve.from_sweep("t", v, curve(v, lam=0.01, rs=1000.0))
    settings = JudgeSettings(
        limits=(
            FigureLimit("regulated_current", 1.9e-3, 2.1e-3),
            FigureLimit("limiting_voltage", None, 1.0),
        )
    )
    j = judge_curve(c, settings)
    assert j.verdict == "fail"
    assert any(r.startswith("regulated current") and "below min" in r for r in j.reasons)
    assert any(r.startswith("limiting voltage") and "above max" in r for r in j.reasons)
    passing = JudgeSettings(limits=(FigureLimit("regulated_current", 1.7e-3, 2.0e-3),))
    assert judge_curve(c, passing).verdict == "pass"


def test_compliance_points_are_never_used():
    v = np.linspace(0, 40, 81)
    i = np.minimum(v / 100.0, 5e-3)  # a 100 ohm part clamped at 5 mA from 0.5 V
    c = Curve.from_sweep("s", np.where(i >= 5e-3, 0.5, v), i, in_compliance=i >= 5e-3)
    j = judge_curve(c, JudgeSettings())
    assert j.classification == "short"
    assert j.verdict == "fail"


def test_open_device():
    v = np.linspace(0, 40, 81)
    j = judge_curve(Curve.from_sweep("o", v, np.full(v.size, 2e-10)), JudgeSettings())
    assert j.classification == "open" and j.verdict == "fail"
